"""``python -m powderspin`` runs the command line."""

from .cli.main import console

console()
