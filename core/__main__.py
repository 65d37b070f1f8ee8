"""``python -m kipup.core``: the kipup command line (see :mod:`kipup.core.cli`)."""
import sys

from .cli import main

sys.exit(main())
