"""Shared test helpers: where the published reference values live (``tests/reference/``)."""

from __future__ import annotations

import os
import signal
import tomllib
from pathlib import Path

import pytest
from hypothesis import settings

# Under CI (the CI variable set) the property tests draw the same examples on every run, so that a
# failure there can be repeated; elsewhere they draw new ones each time, which finds more.
settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")

# A test run started in the background inherits SIGINT ignored, and Python then installs no handler
# of its own; the Ctrl-C tests (and the processes they start) need the ordinary one.
if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
    signal.signal(signal.SIGINT, signal.default_int_handler)

# Published check data, copied into the project with its provenance (see reference/README.md).
REFERENCE = Path(__file__).resolve().parent / "reference"


@pytest.fixture(scope="session")
def mgh_reference() -> dict[int, dict]:
    """Moré, Garbow & Hillstrom (1981) reference facts, keyed by problem number."""
    with open(REFERENCE / "mgh1981.toml", "rb") as handle:
        data = tomllib.load(handle)
    return {p["number"]: p for p in data["problem"]}


def carries_the_caution(text: str) -> bool:
    """True when ``text`` carries the caution of the README ("Caution"), in its own words.

    Whatever the line breaks: validate independently before any safety-relevant use, and defer
    to local codes and licensed professional practice.
    """
    flat = " ".join(text.lower().split())
    return all(
        words in flat
        for words in ("validate", "independently", "safety-relevant use", "local codes",
                      "licensed professional practice")
    )
