"""Reference baselines, not part of the method (Nelder–Mead 1965, Hooke–Jeeves 1961, coordinate
search with golden-section line searches, golden section).

The implementations live in `directional.benchmarking.baselines`, so that the installed
``directional bench`` can run them; this module re-exports them for the benchmarks folder.
"""

from directional.benchmarking.baselines import (
    BaselineResult,
    coordinate_search,
    golden_section,
    hooke_jeeves,
    nelder_mead,
)

__all__ = ["BaselineResult", "coordinate_search", "golden_section", "hooke_jeeves", "nelder_mead"]
