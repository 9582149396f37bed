"""``python -m qgradlib demo`` is the same as ``qgradlib demo``."""
import sys

from .cli import main

sys.exit(main())
