"""The explanation stage inside ``mlsites run`` (see mlsites.experiment._stages)."""


def explain_in_run(ctx):
    """Attributions and held-out importance of every learner; None until wired in."""
    return None


def contributions_in_run(ctx):
    """Per-layer contribution maps of the best learner; None until wired in."""
    return None
