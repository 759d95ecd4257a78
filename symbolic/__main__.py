"""``python -m symbolic`` runs the gainsmith command line."""

import sys

from .cli import main

sys.exit(main())
