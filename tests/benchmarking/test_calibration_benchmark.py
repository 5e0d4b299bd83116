"""The calibration benchmark (benchmarks/calibration.py): its counts add up and its targets are
computed from the runs.  Benchmarks are not tests: no number of `calibrate` is asserted here.

Certified values: NIST StRD nonlinear regression, DanWood (tests/reference/nist-strd).
"""

from __future__ import annotations

import math

import pytest

from benchmarks import calibration


def test_the_sets_in_the_tests_come_first_and_every_file_is_run():
    names = calibration.sets()
    assert names[:len(calibration.TESTED)] == list(calibration.TESTED)
    assert len(names) == len(set(names)) == len(list(calibration.NIST.glob("*.toml")))


def test_one_run_adds_up():
    row = calibration.measure("DanWood", "start2")
    assert sum(row.phases.values()) == row.calibrate_total
    assert sum(row.before.values()) == row.calibrate_to
    # Both reach NIST's certified RSS (the tests of calibrate and of the baseline say so).
    assert row.calibrate_to is not None and row.calibrate_to <= row.calibrate_total
    assert row.lm_to is not None and row.lm_to <= row.lm_total
    assert row.estimates and row.deviations and row.verdict == "minimum"


def _row(name: str, to: int | None, total: int, lm_to: int | None, lm_total: int,
         **changes) -> calibration.Row:
    fields = dict(name=name, start="start1", tested=True, calibrate_to=to,
                  calibrate_total=total, phases={"line": total}, before={"line": total},
                  estimates=True,
                  deviations=True, verdict="minimum", stop="converged", capped="",
                  lm_to=lm_to, lm_total=lm_total, lm_reason="relative reduction", seconds=0.0)
    return calibration.Row(**(fields | changes))


def _met(rows: list[calibration.Row]) -> list[bool]:
    return [met for _, _, met, _ in calibration.targets(rows, None)]


def test_the_targets_are_met_at_their_limits_and_not_beyond():
    # Ratios to the baseline 1.0 (to S) and 1.5 (total): both limits are met.
    at = [_row("A", 10, 15, 10, 10), _row("B", 20, 30, 20, 20), _row("C", 5, 6, 10, 10)]
    assert _met(at) == [True, True, True, True]
    over = [_row("A", 11, 16, 10, 10), _row("B", 21, 31, 20, 20), _row("C", 5, 6, 10, 10)]
    assert _met(over) == [False, False, True, True]


def test_a_run_the_baseline_misses_is_left_out_and_one_calibrate_misses_counts_as_infinite():
    rows = [_row("A", 10, 10, 10, 10), _row("B", None, 50, 10, 10), _row("C", 999, 999, None, 9)]
    (label, measured, met, _), *_ = calibration.targets(rows, None)
    assert "2 runs" in measured and not met  # median of 1.0 and inf
    assert calibration._ratio(None, 10) == math.inf
    assert math.isnan(calibration._ratio(5, None))


@pytest.mark.parametrize(("change", "index"), [({"verdict": "flat"}, 2),
                                               ({"deviations": False}, 2),
                                               ({"capped": "stalled", "stop": "stalled"}, 3)])
def test_one_bad_run_fails_its_target(change, index):
    rows = [_row("A", 10, 10, 10, 10), _row("B", 10, 10, 10, 10, **change)]
    met = _met(rows)
    assert not met[index] and all(m for i, m in enumerate(met) if i != index)


def test_the_run_writes_its_section(tmp_path):
    out = tmp_path / "calibration.md"
    assert calibration.main(["--sets", "DanWood", "--out", str(out)]) == 0
    text = out.read_text(encoding="utf-8")
    assert text.startswith("## Calibration")
    for part in ("### Targets", "### Runs", "phase by phase", "| DanWood | 1 |",
                 "| DanWood | 2 |"):
        assert part in text


def test_the_shares_are_medians_of_each_runs_fractions():
    rows = [_row("A", 1, 10, 1, 1, phases={"line": 6, "jacobian": 4}),
            _row("B", 1, 10, 1, 1, phases={"line": 2, "jacobian": 8}),
            _row("C", 1, 10, 1, 1, phases={"line": 5, "jacobian": 5})]
    assert calibration.shares(rows) == "line 50 %, jacobian 50 %"
