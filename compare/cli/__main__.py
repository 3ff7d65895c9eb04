"""``python -m compare.cli``: the same as the ``fluidgap`` console script."""

import sys

from .main import main

sys.exit(main())
