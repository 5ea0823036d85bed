"""``python -m render`` does the same as the ``nullray`` command."""

import sys

from .cli import main

if __name__ == "__main__":
    sys.exit(main())
