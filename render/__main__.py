"""``python -m render`` does the same as the ``nullray`` command."""

import sys

from .cli import main

sys.exit(main())
