"""Colours and markers of the learners, shared by every figure that compares them.

Five colours of our own, far apart in lightness and hue so they stay apart under the
common colour-vision deficiencies (tests/explain/test_stage.py measures that with
colorspacious), each paired with a marker and a line style so a figure never relies on
colour alone.
"""

__all__ = ["LEARNER_COLOURS", "LEARNER_MARKERS", "LEARNER_DASHES", "learner_style"]

#: Learner colours, in the order learners are listed (navy, orange, sky, umber, grey).
LEARNER_COLOURS = ("#17336b", "#d9822b", "#6cb0e0", "#7a4a00", "#9b9b9b")
LEARNER_MARKERS = ("o", "s", "D", "^", "v")
#: Line styles of curves, in the same order (matplotlib dash patterns).
LEARNER_DASHES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1, 1, 1)))


def learner_style(i):
    """(colour, marker) of the i-th learner; cycles after five."""
    return LEARNER_COLOURS[i % len(LEARNER_COLOURS)], LEARNER_MARKERS[i % len(LEARNER_MARKERS)]
