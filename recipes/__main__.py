"""``python -m thermoseed.recipes`` runs the thermoseed command line."""

import sys

from thermoseed.recipes.cli import main

sys.exit(main())
