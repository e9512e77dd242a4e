"""``python -m pairlens``: the same as the ``pairlens`` command."""

import sys

from .cli import main

sys.exit(main())
