"""``python -m stabilize`` runs the command line."""

import sys

from .cli import main

__all__: list[str] = []

sys.exit(main())
