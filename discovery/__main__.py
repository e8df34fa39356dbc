"""``python -m discovery`` runs the ``edgewise`` command."""

import sys

from .cli import main

sys.exit(main())
