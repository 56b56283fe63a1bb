"""Checks of saved models on later-found sites (see mlsites.experiment._stages)."""


def check_in_run(ctx):
    """Check the run's mapped models on the experiment's later-found sites; None until wired in."""
    return None
