"""``python -m benchmarks [--quick] [--out DIR]``: run the benchmarks and rewrite RESULTS.md.

BLAS is held to one thread unless the caller says otherwise: the matrices of the search are at
most 100 x 100, and on a busy machine competing BLAS threads made one such SVD a hundred times
slower, which would swamp the overhead measurement (RESULTS.md records the setting).
"""

import os
import sys

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from directional.benchmarking import main  # noqa: E402  (after the thread setting)

sys.exit(main(sys.argv[1:]))
