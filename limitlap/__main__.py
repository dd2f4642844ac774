"""``python -m limitlap`` runs the command line."""

from limitlap.cli import run

run()
