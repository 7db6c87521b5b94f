"""``python -m pesflow`` runs the command line."""

import sys

from pesflow.cli import main

sys.exit(main())
