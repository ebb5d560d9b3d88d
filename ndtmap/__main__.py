"""``python -m ndtmap`` runs the command line."""

import sys

from ndtmap.cli.app import main

sys.exit(main())
