"""``python -m pipeline`` runs the castline command line."""

from pipeline.cli import entry

entry()
