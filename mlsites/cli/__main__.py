"""``python -m mlsites.cli`` runs the command line (used by benchmarks)."""

from mlsites.cli.main import main

main()
