"""``python -m profshape``: the ``profshape`` command line."""

import sys

from .cli import main

sys.exit(main())
