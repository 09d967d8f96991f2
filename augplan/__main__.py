"""``python -m augplan`` runs the command line."""

import sys

from augplan.cli import main

sys.exit(main())
