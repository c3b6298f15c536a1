"""``python -m harmtrack``: the command line (see :mod:`harmtrack.cli`)."""

from .cli import console

if __name__ == "__main__":
    console()
