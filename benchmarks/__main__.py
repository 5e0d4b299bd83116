"""``python -m benchmarks [--quick] [--out DIR]``: run the benchmarks and rewrite RESULTS.md."""

import sys

from directional.benchmarking import main

sys.exit(main(sys.argv[1:]))
