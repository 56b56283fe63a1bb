"""The periods stage inside ``mlsites run`` (see mlsites.experiment._stages)."""


def periods_in_run(ctx):
    """Time blocks, envelopes and period-specific models; None until wired in."""
    return None
