"""The report stage inside ``mlsites run`` (see mlsites.experiment._stages)."""


def report_in_run(ctx):
    """Write the run's HTML report; None until wired in."""
    return None
