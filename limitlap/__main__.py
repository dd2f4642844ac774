"""``python -m limitlap`` runs the command line."""

from limitlap.cli import main

main()
