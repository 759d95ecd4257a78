"""``python -m symbolic`` runs the gainsmith command line."""

from .cli import run

run()
