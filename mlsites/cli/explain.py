"""``mlsites explain MODEL_CARD``: why one saved model predicts what it does."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import echo_unless, quiet_option


@click.command(name="explain")
@click.argument("model_card", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Folder to create (refused if it exists, unless --fresh). Default: explain_LEARNER in the "
              "run folder named by the card (beside the card when that folder is gone).")
@click.option("--fresh", is_flag=True, help="Replace an existing output folder. Default: refuse it.")
@quiet_option
@handle_errors
def explain(model_card, out_dir, fresh, quiet):
    """Explain the model of MODEL_CARD (models/NAME/LEARNER.card.json).

    Writes importance.csv and importance.png (mean |SHAP| per layer and its
    share; held-out permutation importance: drop of the fold AUC when a layer
    is shuffled in the fold's held-out cells), shap_values.csv, response curves
    (response_LAYER.png, response_curves.csv), correlated_layers.csv and
    explain.json. Sizes and survey layers are the [explain] settings of the
    card's run (defaults otherwise); the training table is the card's. Held-out
    importance needs the fold models saved beside the card. An explanation
    describes the model, not the past, and never replaces field survey.
    """
    from mlsites.explain._saved import explain_saved_model

    result = explain_saved_model(model_card, out_dir, fresh=fresh, quiet=quiet, log=echo_unless(quiet),
                                 warn=lambda m: click.echo(f"mlsites: warning: {m}", err=True))
    name = result.settings["learners"][0]
    click.echo(f"{name}: layers by importance: {', '.join(result.top_layers(name, len(result.settings['features'])))}")
    if not quiet:
        click.echo(f"explanations in {result.out_dir}", err=True)
