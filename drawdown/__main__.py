"""``python -m drawdown`` runs the command line."""

import sys

from drawdown.cli import main

sys.exit(main())
