"""``python -m pipeline`` runs the castline command line."""

import sys

from pipeline.cli import main

sys.exit(main())
