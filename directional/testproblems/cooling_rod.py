"""Cooling rod: a small transient heat-conduction model, run as a program (our own scenario).

An aluminium rod, taken hot from an oven at ``START`` degC, is clamped at one end (``x = 0``) in
a water-cooled block held at the air temperature ``AIR``; the other end (``x = L``) is free, and
the whole lateral surface loses heat to still air.  Three thermocouples at ``POSITIONS`` are
read every two minutes.  The two unknowns are the conductivity ``k`` [W/(m K)] of the alloy and
the heat-transfer coefficient ``h`` [W/(m2 K)] of the surface.  The model is the one-dimensional
fin equation (Incropera & DeWitt 2002, sec. 3.6) made transient::

    rho c dT/dt = k d2T/dx2 - (4 h / D) (T - AIR),   T(0, t) = AIR,   dT/dx(L, t) = 0,
    T(x, 0) = START,

with heat loss at the free tip neglected.  It is solved for the excess temperature
``u = T - AIR`` with second-order central differences in ``x`` and backward (implicit) Euler
steps in ``t`` (Smith 1985, ch. 2), unconditionally stable, so the step is chosen for accuracy
alone: at the default grid the temperatures agree with the Fourier-series solution (Carslaw &
Jaeger 1959, ch. 3, times the lateral-loss factor ``exp(-4 h t / (D rho c))``) to about
0.1 K, below the sensor noise.  One run takes a few milliseconds after the numpy import.

The program prints a few lines of progress and, as its last line, ``misfit VALUE``: the sum of
squared differences [K2] between simulated and "measured" temperatures.  The measurements in
``MEASURED`` are INVENTED for the example: produced once by this model at ``TRUE`` (k = 170,
h = 12) with invented sensor noise (sigma = 0.3 K) and rounded to 0.1 degC.  They come from no
real rod.

Usage (as a script path, or as ``python -m directional.testproblems.cooling_rod``)::

    python cooling_rod.py --conductivity 170 --coefficient 12
    python cooling_rod.py --conductivity 170 --coefficient 12 --json      # JSON on stdout
    python cooling_rod.py --conductivity 170 --coefficient 12 --out m.txt  # misfit alone to a file

Misbehaviours, for testing a driver of external programs: ``--hang`` (sleep forever),
``--ignore-term`` (ignore SIGTERM, then sleep forever), ``--fail-above X`` (exit 3 with a message
on stderr when a parameter exceeds X), ``--garbage`` (print no number), ``--flood`` (write about
200 MB to stdout before the result), ``--leave-child`` (start a sleeping child that keeps stdout
open, then finish normally), ``--pid-file FILE`` (with the three that start or hang: start a
sleeping child and write "own-pid child-pid" to FILE).

The script uses only numpy and the standard library and imports nothing from ``directional``.

References
----------
1. Incropera, F. P. & DeWitt, D. P. (2002). Fundamentals of Heat and Mass Transfer, 5th ed.
   Wiley.
2. Carslaw, H. S. & Jaeger, J. C. (1959). Conduction of Heat in Solids, 2nd ed. Oxford
   University Press.
3. Smith, G. D. (1985). Numerical Solution of Partial Differential Equations: Finite Difference
   Methods, 3rd ed. Oxford University Press.
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import subprocess
import sys
import time
from collections.abc import Sequence

import numpy as np

LENGTH = 0.30  # m
DIAMETER = 0.02  # m
HEAT_CAPACITY = 2.43e6  # J/(m3 K), rho c of aluminium: 2700 kg/m3 x 900 J/(kg K)
AIR = 20.0  # degC, air and clamp block
START = 250.0  # degC, the rod out of the oven
POSITIONS = (0.10, 0.20, 0.30)  # m from the clamped end
TIMES = tuple(float(t) for t in range(120, 1201, 120))  # s
CELLS = 60  # grid intervals along the rod
STEP = 0.25  # s, backward Euler time step
TRUE = {"conductivity": 170.0, "coefficient": 12.0}  # invented "true" values

# INVENTED measurements [degC]: one row per time in TIMES, one column per position in POSITIONS.
# Generated from this model at TRUE plus invented noise (sigma 0.3 K), rounded to 0.1 degC.
MEASURED = (
    (134.3, 198.7, 215.9),
    (93.6, 146.4, 164.5),
    (71.4, 109.2, 122.2),
    (56.3, 82.7, 92.7),
    (45.8, 64.1, 71.0),
    (37.6, 51.1, 56.3),
    (33.0, 42.2, 45.5),
    (28.7, 35.7, 37.8),
    (26.4, 31.0, 33.0),
    (24.5, 28.2, 28.9),
)


def simulate(
    conductivity: float,
    coefficient: float,
    *,
    times: Sequence[float] = TIMES,
    positions: Sequence[float] = POSITIONS,
    cells: int = CELLS,
    step: float = STEP,
) -> np.ndarray:
    """Return the rod temperatures [degC], shape ``(len(times), len(positions))``.

    Positions are rounded to the nearest grid node; times to the nearest multiple of ``step``.

    >>> round(float(simulate(170.0, 12.0)[0, 2]), 1)  # the free end after two minutes
    215.8

    Raises
    ------
    ValueError
        If the conductivity or the coefficient is not positive and finite, or the grid is empty.
    """
    for name, value in (("conductivity", conductivity), ("coefficient", coefficient)):
        if not (np.isfinite(value) and value > 0.0):
            raise ValueError(f"{name} must be positive and finite, got {value!r}")
    if cells < 1 or not step > 0.0:
        raise ValueError(f"need cells >= 1 and step > 0, got {cells!r}, {step!r}")
    dx = LENGTH / cells
    alpha = conductivity / HEAT_CAPACITY  # m2/s
    beta = 4.0 * coefficient / (DIAMETER * HEAT_CAPACITY)  # 1/s, lateral loss rate
    # Unknowns: u at nodes 1..cells (node 0 is clamped at u = 0).  The free end mirrors node
    # cells-1 across node cells (zero gradient).
    diffusion = alpha / dx**2
    system = np.diag(np.full(cells, 1.0 + step * (2.0 * diffusion + beta)))
    system -= np.diag(np.full(cells - 1, step * diffusion), 1)
    system -= np.diag(np.full(cells - 1, step * diffusion), -1)
    if cells > 1:
        system[-1, -2] = -2.0 * step * diffusion
    advance = np.linalg.inv(system)
    nodes = [round(x / dx) for x in positions]
    u = np.full(cells, START - AIR)
    rows, now, jumps = [], 0, {}
    for t in times:
        steps = round(t / step) - now
        if steps not in jumps:  # many steps at once: the same scheme, fewer operations
            jumps[steps] = np.linalg.matrix_power(advance, steps)
        u = jumps[steps] @ u
        now += steps
        full = np.concatenate(([0.0], u))
        rows.append(AIR + full[nodes])
    return np.array(rows)


def residuals(conductivity: float, coefficient: float) -> np.ndarray:
    """Return simulated minus measured temperatures [K], flattened time by time (30 values)."""
    return (simulate(conductivity, coefficient) - np.array(MEASURED)).ravel()


def misfit(conductivity: float, coefficient: float) -> float:
    """Return the sum of squared residuals [K2] against the invented measurements."""
    r = residuals(conductivity, coefficient)
    return float(r @ r)


def _sleep_forever() -> None:
    while True:
        time.sleep(60.0)


def _start_child(pid_file: str | None) -> None:
    """Start a sleeping child that shares our stdout and process group; note both pids."""
    child = subprocess.Popen([sys.executable, "-c", "import time\nwhile True: time.sleep(60)"])
    if pid_file is not None:
        with open(pid_file, "w") as f:
            f.write(f"{os.getpid()} {child.pid}\n")


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(description="Cooling rod: misfit against invented measurements.")
    p.add_argument("--conductivity", type=float, required=True, help="k in W/(m K)")
    p.add_argument("--coefficient", type=float, required=True, help="h in W/(m2 K)")
    p.add_argument("--json", action="store_true", help="print a JSON document instead")
    p.add_argument("--out", metavar="FILE", help="also write the misfit to FILE")
    p.add_argument("--hang", action="store_true", help="sleep forever")
    p.add_argument("--ignore-term", action="store_true", help="ignore SIGTERM, sleep forever")
    p.add_argument("--fail-above", type=float, metavar="X", help="exit 3 if a parameter > X")
    p.add_argument("--garbage", action="store_true", help="print no number")
    p.add_argument("--flood", action="store_true", help="write ~200 MB to stdout first")
    p.add_argument("--leave-child", action="store_true", help="leave a child holding stdout")
    p.add_argument("--pid-file", metavar="FILE", help="write 'own-pid child-pid' to FILE")
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Run the program; return its exit status."""
    args = _parser().parse_args(argv)
    if args.ignore_term:
        signal.signal(signal.SIGTERM, signal.SIG_IGN)  # inherited by the child below
    if args.hang or args.ignore_term:
        _start_child(args.pid_file)
        _sleep_forever()
    k, h = args.conductivity, args.coefficient
    if args.fail_above is not None and max(k, h) > args.fail_above:
        message = f"cooling_rod: parameter above {args.fail_above!r}: k={k!r}, h={h!r}"
        print(message, file=sys.stderr)
        return 3
    if not (k > 0.0 and h > 0.0):
        print(f"cooling_rod: k and h must be positive, got k={k!r}, h={h!r}", file=sys.stderr)
        return 2
    if args.garbage:
        print("cooling rod: the thermocouples are unplugged\nno result today")
        return 0
    if args.leave_child:
        _start_child(args.pid_file)
    if args.flood:
        block = b"flood flood flood flood flood flood flood flood flood flood flood.\n" * 16000
        for _ in range(200):  # 200 x ~1 MiB
            sys.stdout.buffer.write(block)
        sys.stdout.buffer.flush()
    temperatures = simulate(k, h)
    r = (temperatures - np.array(MEASURED)).ravel()
    value = float(r @ r)
    if args.out is not None:
        with open(args.out, "w") as f:
            f.write(f"{value!r}\n")
    if args.json:
        fit = {"misfit": value, "rms": float(np.sqrt(value / r.size)), "points": int(r.size)}
        print(json.dumps({"misfit": value, "fit": fit, "residuals": r.tolist()}, indent=2))
        return 0
    print(f"cooling rod: k = {k!r} W/(m K), h = {h!r} W/(m2 K)")
    for t, row in zip(TIMES, temperatures, strict=True):
        print(f"t = {t:6.0f} s   " + "   ".join(f"{v:7.2f}" for v in row))
    print(f"misfit {value!r}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
