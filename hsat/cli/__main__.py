"""``python -m hsat.cli`` runs the command line."""

import sys

from hsat.cli import main

sys.exit(main())
