"""``python3 -m rlmeson ...`` is the same as the ``rlmeson`` command."""

import sys

from .cli import main

sys.exit(main())
