"""``python -m fstats`` runs the command line."""

import sys

from fstats.cli import main

sys.exit(main())
