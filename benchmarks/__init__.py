"""Benchmarks of `directional`; run ``python -m benchmarks`` (or ``directional bench``)."""

from pathlib import Path


def publish(text: str, out: Path | None) -> None:
    """Print a benchmark's Markdown and, when ``out`` is given, write it there (folders made)."""
    print(text)
    if out is not None:
        out.parent.mkdir(parents=True, exist_ok=True)
        out.write_text(text, encoding="utf-8")
