"""``python -m gui [DATA | SESSION]`` opens the window."""

import sys

from .app import main

raise SystemExit(main(sys.argv[1] if len(sys.argv) > 1 else None))
