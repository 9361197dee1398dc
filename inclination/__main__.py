"""``python -m inclination``: the same command line as the ``inclination`` script."""

import sys

from .cli import main

if __name__ == "__main__":
    sys.exit(main())
