"""What ``import mlsites`` (and each stage) loads: heavy optional libraries stay lazy."""

import subprocess
import sys


def test_shap_is_not_imported_by_the_package_or_the_cli():
    # STYLE.md §6: shap is imported inside the commands that explain models, so
    # importing the package, its stages and the command group never loads it.
    code = ("import sys, mlsites, mlsites.experiment, mlsites.learners, mlsites.evaluation, mlsites.sampling, "
            "mlsites.folds, mlsites.terrain, mlsites.cli.main; print('shap' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
