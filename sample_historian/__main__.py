"""``python -m sample_historian``: the same as ``python -m sample_historian.generate``."""

import sys

from .generate import main

sys.exit(main())
