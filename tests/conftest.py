"""Shared test helpers: where the published reference values live."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

REFERENCE = Path(__file__).resolve().parents[1].parent / "shared" / "reference"


@pytest.fixture(scope="session")
def mgh_reference() -> dict[int, dict]:
    """Moré, Garbow & Hillstrom (1981) reference facts, keyed by problem number."""
    with open(REFERENCE / "mgh1981.toml", "rb") as handle:
        data = tomllib.load(handle)
    return {p["number"]: p for p in data["problem"]}
