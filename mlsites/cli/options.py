"""Options shared by several commands."""

import click

quiet_option = click.option("--quiet", "-q", is_flag=True, help="No progress bars or stage lines (errors and warnings still show).")
overwrite_option = click.option("--overwrite", is_flag=True, help="Replace existing outputs (default: refuse to overwrite).")


def echo_unless(quiet):
    """A logger that prints stage lines to stderr unless ``quiet``."""
    return (lambda msg: None) if quiet else (lambda msg: click.echo(msg, err=True))


def comma_floats(ctx, param, value):
    """Click callback: "100,500" -> (100.0, 500.0)."""
    if value is None:
        return None
    try:
        return tuple(float(v) for v in value.replace(",", " ").split())
    except ValueError:
        raise click.BadParameter(f"expected numbers separated by commas, got {value!r}") from None


def comma_names(ctx, param, value):
    """Click callback: "slope,aspect" -> ("slope", "aspect")."""
    return None if value is None else tuple(v for v in value.replace(",", " ").split() if v)
