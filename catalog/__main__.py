"""``python -m catalog``: the same command as the ``catalog`` script."""

import sys

from catalog.cli import main

sys.exit(main())
