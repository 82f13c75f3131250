"""``python -m tracevet`` runs the command-line interface."""

from tracevet.cli.main import entry_point

entry_point()
