"""``python -m synth`` runs the command line (the same as the ``synth`` script)."""

import sys

from .cli import main

sys.exit(main())
