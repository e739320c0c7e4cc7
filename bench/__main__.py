"""``python -m bench`` is the ``bench`` command."""

import sys

from bench.cli import main

sys.exit(main())
