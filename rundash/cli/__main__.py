"""``python -m rundash.cli``: the command line."""

import sys

from rundash.cli import main

sys.exit(main())
