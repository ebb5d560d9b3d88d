"""``python -m ndtmap`` runs the command line."""

import sys

from ndtmap.cli import main

sys.exit(main())
