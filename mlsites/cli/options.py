"""Options shared by several commands."""

import click

quiet_option = click.option("--quiet", "-q", is_flag=True, help="No progress bars or stage lines.")
overwrite_option = click.option("--overwrite", is_flag=True, help="Replace existing outputs.")


def echo_unless(quiet):
    """A logger that prints stage lines to stderr unless ``quiet``."""
    return (lambda msg: None) if quiet else (lambda msg: click.echo(msg, err=True))
