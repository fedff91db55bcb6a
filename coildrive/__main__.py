"""``python -m coildrive`` runs the command line."""

from .cli import main

main()
