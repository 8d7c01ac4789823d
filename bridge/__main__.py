"""``python -m bridge`` runs the thermoseed command line."""

import sys

from .cli import main

sys.exit(main())
