"""Benchmarks of `directional`; run ``python -m benchmarks`` (or ``directional bench``)."""
