"""``python -m benchmarks [--quick]``: every public function side by side (see benchmarks/suite.py)."""

import sys

from benchmarks.suite import main

sys.exit(main())
