"""``python -m phantomlab`` runs the command line."""

from phantomlab.cli import entry_point

entry_point()
