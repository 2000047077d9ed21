"""``python -m profshape.cli``: the ``profshape`` command line."""

import sys

from . import main

sys.exit(main())
