"""``python -m harmtrack``: the same as the ``harmtrack`` command."""

import sys

from harmtrack.cli import main

if __name__ == "__main__":
    sys.exit(main())
