"""``python -m perfcheck.scenario OUT_DIR``: write the demo site into OUT_DIR."""

import sys

from perfcheck.scenario import main

sys.exit(main())
