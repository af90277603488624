"""``python -m perfcheck.scenario.suite --plants 22 --out DIR``: the per-kind table."""

import sys

from perfcheck.scenario.suite import main

sys.exit(main())
