"""``python -m inference`` runs the ``arrhenia`` command."""

from .cli import console

console()
