"""The ``mlsites`` command group: logging, error mapping, subcommand registry."""

from __future__ import annotations

import functools
import sys

import click

from mlsites import __version__

#: Subcommands, imported only when called so ``mlsites --help`` starts fast.
_COMMANDS = {
    "terrain": ("mlsites.cli.terrain", "terrain", "Derive terrain layers from a DEM."),
    "demo": ("mlsites.cli.demo", "demo", "Write the fictional demo study and run every stage on it."),
    "run": ("mlsites.cli.run", "run", "Run an experiment file end to end."),
    "sample": ("mlsites.cli.sample", "sample", "Build the sample table and folds of an experiment."),
    "periods": ("mlsites.cli.periods", "periods", "Sites through time: blocks, envelopes, density maps."),
    "map": ("mlsites.cli.map", "map_command", "Map a saved model: potential, zones and spread rasters."),
    "explain": ("mlsites.cli.explain", "explain", "Explain a saved model: SHAP, held-out importance, response curves."),
    "check": ("mlsites.cli.check", "check", "Check a saved model on sites found after it was made."),
    "report": ("mlsites.cli.report", "report", "Rebuild the HTML report of a finished run."),
}


class _LazyGroup(click.Group):
    def list_commands(self, ctx):
        return sorted(_COMMANDS)

    def get_command(self, ctx, name):
        if name not in _COMMANDS:
            return None
        import importlib

        module, attr, _ = _COMMANDS[name]
        return getattr(importlib.import_module(module), attr)


def handle_errors(func):
    """Turn mlsites errors into one line on stderr and exit status 2.

    Only :class:`mlsites.errors.MlsitesError` (bad input the user can fix) is
    mapped; anything else is a bug and keeps its traceback. ``--debug`` on the
    group shows tracebacks for user errors too.
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        import warnings

        from mlsites.errors import MlsitesError

        def show(message, category, *rest, **kw):
            # Warnings about the data (dropped records, partial neighbourhoods) are
            # part of the report: one plain line each, no source location.
            click.echo(f"mlsites: warning: {message}", err=True)

        try:
            with warnings.catch_warnings():
                warnings.showwarning = show
                return func(*args, **kwargs)
        except MlsitesError as exc:
            ctx = click.get_current_context(silent=True)
            if ctx is not None and (ctx.find_root().obj or {}).get("debug"):
                raise
            click.echo(f"mlsites: error: {exc}", err=True)
            sys.exit(2)

    return wrapper


@click.group(cls=_LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="mlsites")
@click.option("--debug", is_flag=True, help="Show tracebacks for input errors.")
@click.pass_context
def cli(ctx, debug):
    """Archaeological site-potential modelling from experiment files.

    A potential map never replaces field survey, nor the heritage law and
    licensed practice of the place where it is used.
    """
    ctx.obj = {"debug": debug}


def main():
    cli(prog_name="mlsites")
