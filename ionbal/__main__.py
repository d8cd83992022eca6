"""``python -m ionbal``: the same entry point as the ``ionbal`` command."""

import sys

from ionbal._launch import main

sys.exit(main())
