"""Benchmarks of `directional`: the machinery behind ``directional bench``.

Runs the method, reference baselines and ablations on the Moré–Garbow–Hillstrom (1981) test set
and draws data and performance profiles (Moré & Wild 2009; Dolan & Moré 2002); measures how the
method scales (quadratics, optimizer overhead, the line search alone); writes ``RESULTS.md`` and
PNG figures.  Benchmarks are not tests: nothing here asserts a number.
"""

from directional.benchmarking.runner import main

__all__ = ["main"]
