"""``python -m pipeline`` runs the castline command line."""

import sys

from .cli import main

sys.exit(main())
