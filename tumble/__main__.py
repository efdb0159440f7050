"""``python -m tumble`` runs the command line."""

import sys

from tumble.cli import main

sys.exit(main())
