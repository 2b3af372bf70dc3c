"""``python -m stripscan`` runs the command line."""

import sys

from stripscan.cli.main import main

sys.exit(main())
