"""mlsites: machine-learning workbench for archaeological site-potential modelling.

Each pipeline stage is a subpackage usable on its own:
``grid`` -> ``terrain`` -> ``sampling`` -> ``folds`` -> ``learners`` ->
``evaluation`` -> ``explain`` -> ``mapping`` -> ``report``; ``experiment`` wires
them from a TOML file and ``cli`` is a thin command-line layer over them.
"""

__version__ = "0.1.0"
__all__ = ["__version__"]
