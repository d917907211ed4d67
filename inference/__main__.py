"""``python -m inference`` runs the ``arrhenia`` command."""

import sys

from .cli import main

sys.exit(main())
