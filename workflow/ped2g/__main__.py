"""``python -m ped2g`` runs the same command line as ``ped2g``."""

import sys

from .cli import main

sys.exit(main())
