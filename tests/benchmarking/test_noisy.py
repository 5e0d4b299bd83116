"""Checks of the noisy benchmarks: the noise models' statistics, the test functions' minima, the
profile arithmetic on true values worked by hand, the targets, and the RESULTS.md block.

Sources: the uniform distribution on [-1, 1] has mean 0 and variance 1/3, the standard normal
mean 0 and variance 1 (analytic); scipy.stats' Kolmogorov–Smirnov test as the reference for the
distributions; the convergence test of Moré & Wild (2009, eq. 2.2) and the data profile (eq. 2.7)
worked by hand below; the test functions' minima and Hessians derived by hand (analytic).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from benchmarks import noisy as script
from directional.benchmarking import main as bench_main
from directional.benchmarking import noisy, noisystudy, noisywriteup, problems, profiles

N = 20000


def _epsilons(model: noisy.RelativeNoise, f: float) -> np.ndarray:
    return (np.array([model(np.zeros(1)) for _ in range(N)]) / f - 1.0) / model.level


def test_relative_noise_is_uniform_on_minus_one_one_times_the_level():
    eps = _epsilons(noisy.RelativeNoise(lambda x: 2.0, level=1e-3, seed=7), 2.0)
    assert np.all(np.abs(eps) <= 1.0 + 1e-9)
    assert abs(eps.mean()) < 4.0 * math.sqrt(1.0 / 3.0 / N)  # mean 0 (analytic)
    assert abs(eps.var() - 1.0 / 3.0) < 0.01  # variance 1/3 (analytic); its sd here is 0.002
    assert stats.kstest(eps, stats.uniform(loc=-1.0, scale=2.0).cdf).pvalue > 1e-3
    lag = np.corrcoef(eps[:-1], eps[1:])[0, 1]
    assert abs(lag) < 4.0 / math.sqrt(N)  # drawn anew at each call: no correlation between calls


def test_relative_noise_scales_with_the_value_and_vanishes_at_zero():
    small = noisy.RelativeNoise(lambda x: 1.0, level=1e-3, seed=3)
    large = noisy.RelativeNoise(lambda x: 100.0, level=1e-3, seed=3)
    for _ in range(50):
        assert large(np.zeros(2)) == pytest.approx(100.0 * small(np.zeros(2)), rel=1e-14)
    zero = noisy.RelativeNoise(lambda x: 0.0, level=1e-3, seed=3)
    assert all(zero(np.zeros(2)) == 0.0 for _ in range(10))


def test_gaussian_noise_is_standard_normal_times_sigma():
    model = noisy.GaussianNoise(lambda x: 5.0, sigma=1e-2, seed=11)
    eps = (np.array([model(np.zeros(3)) for _ in range(N)]) - 5.0) / 1e-2
    assert abs(eps.mean()) < 4.0 / math.sqrt(N)
    assert abs(eps.var() - 1.0) < 0.05  # sd of the sample variance: sqrt(2 / N) = 0.01
    assert stats.kstest(eps, "norm").pvalue > 1e-3
    assert not stats.kstest(eps, stats.uniform(loc=-1.0, scale=2.0).cdf).pvalue > 1e-3


def test_noise_is_new_at_each_call_and_repeats_with_the_seed():
    one = noisy.GaussianNoise(lambda x: float(x[0]), sigma=1.0, seed=[1, 2])
    two = noisy.GaussianNoise(lambda x: float(x[0]), sigma=1.0, seed=[1, 2])
    other = noisy.GaussianNoise(lambda x: float(x[0]), sigma=1.0, seed=[1, 3])
    x = np.array([0.5])
    first = [one(x) for _ in range(5)]
    assert len(set(first)) == 5  # the same point, five different values
    assert first == [two(x) for _ in range(5)]
    assert first != [other(x) for _ in range(5)]
    assert one.true_values == [0.5] * 5 and one.values == first


def test_a_failed_evaluation_is_kept_as_inf_and_does_not_shift_the_stream():
    def flaky(x):
        if x[0] < 0:
            raise RuntimeError("solver diverged")
        return 1.0

    model = noisy.RelativeNoise(flaky, level=0.1, seed=5)
    twin = noisy.RelativeNoise(lambda x: 1.0, level=0.1, seed=5)
    assert model(np.ones(1)) == twin(np.ones(1))
    with pytest.raises(RuntimeError):
        model(-np.ones(1))
    twin(np.ones(1))
    assert model(np.ones(1)) == twin(np.ones(1))  # the third call has the third draw
    assert model.true_values == [1.0, math.inf, 1.0]


# ---------------------------------------------------------------------------- test functions


def _hessian(f, x: np.ndarray, h: float = 1e-4) -> np.ndarray:
    """Central second differences (common practice, no source)."""
    n = x.size
    e = np.eye(n) * h
    return np.array([[(f(x + e[i] + e[j]) - f(x + e[i] - e[j]) - f(x - e[i] + e[j])
                       + f(x - e[i] - e[j])) / (4 * h * h) for j in range(n)] for i in range(n)])


@pytest.mark.parametrize("function", noisy.smooth_functions(), ids=lambda f: f.name)
def test_each_function_has_minimum_zero_where_it_says(function):
    x = function.minimizer
    assert function(x) == pytest.approx(0.0, abs=1e-14)
    assert function(function.start) > 100 * function.sigma  # the noise does not hide the start
    h = 1e-6
    gradient = [(function(x + h * e) - function(x - h * e)) / (2 * h) for e in np.eye(x.size)]
    assert np.allclose(gradient, 0.0, atol=1e-7)
    eigenvalues = np.linalg.eigvalsh(_hessian(function, x))
    assert eigenvalues.min() > 0.1  # a well-determined minimum: "flat" is wrong there


def test_the_valley_hessian_is_twice_jt_j():
    # Analytic: residuals (1 - x1, √10 (x2 - x1²), √10 (x3 + x2²/2)) vanish at (1, 1, -0.5),
    # so the Hessian there is 2 JᵀJ with the Jacobian worked by hand.
    s = math.sqrt(10.0)
    jacobian = np.array([[-1.0, 0.0, 0.0], [-2.0 * s, s, 0.0], [0.0, s, s]])
    hessian = _hessian(noisy.valley, np.array([1.0, 1.0, -0.5]))
    assert np.allclose(hessian, 2.0 * jacobian.T @ jacobian, atol=1e-5)


@pytest.mark.parametrize(("n", "condition"), [(6, 1e2), (10, 1e3)])
def test_the_quadratics_have_the_stated_condition(n, condition):
    q = noisy.rotation(n)
    assert np.allclose(q.T @ q, np.eye(n), atol=1e-13)
    assert np.min(np.abs(q)) > 1e-3  # every coordinate mixed into every direction
    eigenvalues = np.linalg.eigvalsh(noisy.quadratic_matrix(n, condition))
    assert eigenvalues.min() == pytest.approx(1.0) and eigenvalues.max() == pytest.approx(condition)


def test_the_log_cosh_well_is_quadratic_near_its_centre():
    # Analytic: d²/dy² log cosh y = sech² y = 1 at 0, so the Hessian at c is Qᵀ diag(w) Q.
    q = noisy.rotation(4)
    expected = q.T @ np.diag(noisy.LOGCOSH_WEIGHTS) @ q
    assert np.allclose(_hessian(noisy.logcosh_well, noisy.LOGCOSH_CENTRE), expected, atol=1e-5)
    far = noisy.LOGCOSH_CENTRE + 1e3 * q[0]  # along an eigenvector: y = (1000, 0, 0, 0)
    assert noisy.logcosh_well(far) == pytest.approx(1000.0 - math.log(2.0))  # linear, no overflow


# ---------------------------------------------------------------------------- profile arithmetic


def _study(names: list[str]) -> noisystudy.NoisyStudy:
    # Rosenbrock from its standard start: f(x0) = 24.2 (Moré, Garbow & Hillstrom 1981, problem 1).
    pair = problems.pairs((1,), (1.0,))[0][0]
    assert pair.f0 == pytest.approx(24.2)

    def outcome(values, returned):
        return noisystudy.Outcome(true_values=np.array(values), returned=np.zeros(2),
                                  returned_value=returned)

    runs = [[outcome([24.2, 10.0, 24.2, 0.02, 0.0], 0.01), outcome([24.2, 1.0, 0.5, 0.2], 2.0)]]
    return noisystudy.NoisyStudy(pairs=[pair], dropped=[], names=names, runs=runs, units=100)


def test_counts_on_true_values_by_hand():
    study = _study(["directional", "Nelder-Mead"])
    assert study.lowest().tolist() == [0.0]  # f_L: the least true value anyone evaluated
    # τ = 0.1: solved once f ≤ 2.42: the first solver at its 4th evaluation, the second at its 2nd
    assert study.counts(1e-1).tolist() == [[4.0, 2.0]]
    # τ = 1e-3: f ≤ 0.0242: the first at its 4th, the second never (its best is 0.2)
    assert study.counts(1e-3).tolist() == [[4.0, math.inf]]
    assert study.returned_solved(1e-1).tolist() == [[True, True]]
    assert study.returned_solved(1e-3).tolist() == [[True, False]]
    # data profile, n = 2 so a unit is 3 evaluations: 4 evaluations need 2 units, 2 need 1
    d = profiles.data_profile(study.counts(1e-1), [2], [1, 2])
    assert d.tolist() == [[0.0, 1.0], [1.0, 1.0]]


def test_the_noisy_target_names_the_baseline_ahead():
    # τ = 1e-3: the first solver solves within 2 units, the second never
    met = noisywriteup.noisy_target(_study(["directional", "Nelder-Mead"]))
    assert met[2] and "never behind" in met[1]
    missed = noisywriteup.noisy_target(_study(["Nelder-Mead", "directional"]))
    assert not missed[2] and "Nelder-Mead ahead at 99 of 101 budgets" in missed[1]


def test_a_run_is_judged_on_true_values_not_on_what_the_solver_saw():
    f = noisy.RelativeNoise(lambda x: float(np.sum(x ** 2)), level=0.5, seed=0)

    def solver(objective, start, budget):
        seen = [(objective(start + k), start + k) for k in range(3)]
        return min(seen, key=lambda s: s[0])[1], ""

    out = noisystudy.run_one(solver, f, np.zeros(2), budget=2)
    assert out.true_values.tolist() == [0.0, 2.0]  # cut to the budget, noise-free
    assert out.returned_value == float(np.sum(out.returned ** 2))


# ---------------------------------------------------------------------------- writing


def test_smooth_target_names_what_got_worse():
    before = {"run": "a", "commit": "1", "data": {"1e-03": {"1": 17, "100": 96}},
              "quadratic": {"20": 2.02}}
    same = {"run": "b", "commit": "2", "data": {"1e-03": {"1": 17, "100": 96}},
            "quadratic": {"20": 2.02}}
    assert noisywriteup.smooth_target(before, same)[2]
    worse = {**same, "data": {"1e-03": {"1": 18, "100": 95}}, "quadratic": {"20": 2.10}}
    name, measured, met, basis = noisywriteup.smooth_target(before, worse)
    assert not met and "96 → 95" in measured and "2.02 → 2.10" in measured
    assert "17" not in measured  # a gain is not listed
    assert not noisywriteup.smooth_target(None, same)[2]
    unchanged = noisywriteup.smooth_target(before, dict(before))  # the full run not rerun yet
    assert not unchanged[2] and unchanged[1].startswith("not measured")


def test_include_replaces_inserts_and_appends_in_name_order():
    page = "# R\n\ntext\n\n\n## From `results/check.md`\n\nc\n\n\n## From `results/x.md`\n\nx\n"
    once = noisywriteup.include(page, "noise.md", "n1")
    assert once.index("check.md") < once.index("noise.md") < once.index("x.md")
    assert noisywriteup.include(once, "noise.md", "n1") == once
    assert noisywriteup.include(once, "noise.md", "n2") == once.replace("n1", "n2")
    assert noisywriteup.include(page, "z.md", "z").endswith("x\n\n\n## From `results/z.md`\n\nz\n")


def test_smoke_run_writes_the_page_the_figure_and_the_block(tmp_path):
    folder = tmp_path / "results"
    folder.mkdir()
    results = tmp_path / "RESULTS.md"
    results.write_text("# Benchmark results\n\n\n## From `results/noise.md`\n\nold\n",
                       encoding="utf-8")
    assert script.main(["--smoke", "--out", str(folder / "noise.md")]) == 0
    page = (folder / "noise.md").read_text(encoding="utf-8")
    for heading in ("#### Targets", "#### Noisy MGH", "#### Smooth functions plus Gaussian"):
        assert heading in page
    assert "not measured" in page  # this RESULTS.md has no smooth numbers to compare
    assert (tmp_path / script.FIGURE).stat().st_size > 10_000
    assert results.read_text(encoding="utf-8").endswith(page)


def test_the_noisy_study_repeats_exactly_and_streams_differ():
    chosen, dropped = problems.pairs((1,), (1.0,))
    solvers = noisystudy.profile_solvers()

    def run():
        return noisystudy.run_noisy_mgh(chosen, dropped, solvers, units=100, streams=2)

    first, again = run(), run()
    assert len(first.pairs) == 2 and first.streams == 2
    for a, b in zip(first.runs, again.runs):
        for x, y in zip(a, b):
            assert np.array_equal(x.true_values, y.true_values)  # seeds fixed: deterministic
    hooke_jeeves = first.names.index("Hooke-Jeeves")
    assert not np.array_equal(first.runs[0][hooke_jeeves].true_values,
                              first.runs[1][hooke_jeeves].true_values)  # another noise stream
    assert all(o.true_values.size <= 300 for row in first.runs for o in row)  # 100 (n + 1)


def test_include_lays_out_the_block_as_the_full_run_does(tmp_path):
    # The full run includes results/*.md verbatim; bringing the block up to date in place must
    # give the very text the next full run would write.
    folder = tmp_path / "results"
    folder.mkdir()
    for name, body in (("check.md", "c\n"), ("noise.md", "### Noise\n\nn\n"), ("x.md", "x\n")):
        (folder / name).write_text(body, encoding="utf-8")
    assert bench_main(["--smoke", "--out", str(tmp_path)]) == 0
    written = (tmp_path / "RESULTS.md").read_text(encoding="utf-8")
    assert noisywriteup.include(written, "noise.md", "### Noise\n\nn\n") == written
    changed = noisywriteup.include(written, "noise.md", "### Noise\n\nm\n")
    assert changed == written.replace("### Noise\n\nn\n", "### Noise\n\nm\n")
