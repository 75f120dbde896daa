"""``python -m trapbench`` runs the command line."""

import sys

from .bench.cli import main

sys.exit(main())
