"""PI control of a small electric heater: the model behind the controller-tuning example.

A cartridge heater warms an aluminium block that loses heat to the room.  The block is one lump
with heat capacity ``C`` [J/K] and loss conductance ``G`` [W/K]; the heater power reaches the
temperature sensor only after a dead time ``theta`` [s] (the element and the sensor well are slow).
This is the first-order-plus-dead-time model of process control (Seborg et al. 2011, ch. 6)::

    C dT/dt = P(t - theta) - G (T - T_ambient)

so a constant power ``P`` settles at ``T_ambient + P / G`` with time constant ``C / G``.  The
power is a PI controller's output clipped to ``0 .. max_power``; the integrator moves only as far as
the output stays inside those limits, and is frozen while the error would drive it further out
(conditional integration, an anti-windup scheme described by Åström & Hägglund 2006, sec. 3.5;
here stopped exactly at the limit within a step, see `_integrate`).  At ``t = 0`` the block is at
ambient and the setpoint steps up.

Time is stepped on a fixed grid with the exact solution of the linear ODE over one step for power
held constant (zero-order hold; Franklin, Powell & Workman 1998, ch. 4), so the open-loop response
equals the analytic one at every grid point, whatever the step.

`cost` is the mean squared error over the run, in units of the setpoint step, plus the squared
overshoot in the same units.  The gains are bounded; the upper bound on ``Kp`` stands for the
largest proportional gain the power stage accepts before sensor ripple reaches the heater.  With
the default plant the best gains lie on that bound: tighter control is cut off by the actuator
limit, not by the dead time.  All numbers are invented for the example.

This module does no optimization; it is the objective of the example.

References
----------
1. Seborg, D. E., Edgar, T. F., Mellichamp, D. A. & Doyle, F. J. (2011). Process Dynamics and
   Control, 3rd ed. Wiley.
2. Åström, K. J. & Hägglund, T. (2006). Advanced PID Control. ISA.
3. Franklin, G. F., Powell, J. D. & Workman, M. L. (1998). Digital Control of Dynamic Systems,
   3rd ed. Addison-Wesley.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from directional.errors import ProblemError
from directional.parameters import Parameter
from directional.testproblems import named_values

NAMES = ("Kp", "Ki")


@dataclass(frozen=True, slots=True, kw_only=True)
class Heater:
    """The plant, the setpoint step and the simulation grid (invented values).

    ``delay`` and ``duration`` must be whole numbers of ``step``: the dead time is exact on the
    grid, never rounded.

    Raises
    ------
    ProblemError
        For a non-positive capacity, loss, power, duration or step, a negative delay or weight, a
        delay or duration off the grid, or a setpoint equal to ambient.
    """

    capacity: float = 300.0  # J/K, about 0.33 kg of aluminium
    loss: float = 1.0  # W/K, to the room
    delay: float = 60.0  # s, element and sensor lag as a dead time
    max_power: float = 60.0  # W
    ambient: float = 20.0  # degC
    setpoint: float = 45.0  # degC
    duration: float = 1800.0  # s
    step: float = 1.0  # s
    overshoot_weight: float = 1.0

    def __post_init__(self) -> None:
        for key in ("capacity", "loss", "max_power", "duration", "step"):
            value = getattr(self, key)
            if not (math.isfinite(value) and value > 0):
                raise ProblemError(f"heater {key} must be positive and finite, got {value!r}")
        for key in ("delay", "overshoot_weight"):
            value = getattr(self, key)
            if not (math.isfinite(value) and value >= 0):
                raise ProblemError(f"heater {key} must be >= 0 and finite, got {value!r}")
        for key in ("ambient", "setpoint"):
            value = getattr(self, key)
            if not math.isfinite(value):
                raise ProblemError(f"heater {key} must be finite, got {value!r}")
        for key in ("delay", "duration"):
            ratio = getattr(self, key) / self.step
            if abs(ratio - round(ratio)) > 1e-9 * max(1.0, ratio):
                raise ProblemError(
                    f"heater {key} must be a whole number of steps of {self.step!r} s, "
                    f"got {getattr(self, key)!r}"
                )
        if self.setpoint == self.ambient:
            raise ProblemError(f"heater setpoint must differ from ambient, got {self.setpoint!r}")

    @property
    def gain(self) -> float:
        """Steady-state rise per watt, ``1 / G`` [K/W]."""
        return 1.0 / self.loss

    @property
    def time_constant(self) -> float:
        """``C / G`` [s]."""
        return self.capacity / self.loss


HEATER = Heater()

# A timid first guess; the upper bound on Kp is the power stage's limit (see the module docstring).
PARAMETERS = [
    Parameter("Kp", 0.5, 0.05, 2.5, scale="log", unit="W/K"),
    Parameter("Ki", 1e-3, 1e-5, 0.1, scale="log", unit="W/(K s)"),
]


def _gains(params: Sequence[float] | Mapping[str, float] | np.ndarray) -> tuple[float, float]:
    kp, ki = named_values(params, NAMES, "heater gains")
    for name, value in zip(NAMES, (kp, ki), strict=True):
        if value < 0:
            raise ProblemError(f"heater gain {name!r} must be >= 0, got {value!r}")
    return kp, ki


def _grid(heater: Heater) -> tuple[int, int, float, float]:
    """Return steps, delay in steps, and the one-step decay and input factors."""
    steps = max(1, round(heater.duration / heater.step))
    lag = round(heater.delay / heater.step)
    decay = math.exp(-heater.step / heater.time_constant)
    return steps, lag, decay, (1.0 - decay) * heater.gain


def _integrate(integral: float, increment: float, proportional: float, top: float) -> float:
    """The integrator after one step: it moves by ``increment``, but not past the point where the
    output ``proportional + integral`` reaches a limit (0 or ``top``) in the direction it moves,
    and never back because of a limit.

    Conditional integration decided once per step (integrate the whole step, or not at all) makes
    the integrator, and so the cost, jump when a gain moves the output across a limit at a
    sample: with the default plant the cost jumps by up to 2e-3 between gains 1e-3 apart.  Stopping
    the integration where the output meets the limit keeps the state a continuous function of the
    gains (the cost then has kinks where a sample enters or leaves the limit, no jumps).
    """
    moved = integral + increment
    if increment > 0.0:
        return min(moved, max(integral, top - proportional))
    if increment < 0.0:
        return max(moved, min(integral, -proportional))
    return integral


def simulate(
    params: Sequence[float] | Mapping[str, float] | np.ndarray, heater: Heater = HEATER
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return time [s], block temperature [degC] and heater power [W] of the closed loop.

    ``params`` is ``(Kp, Ki)`` in W/K and W/(K s), or a mapping by name.  ``power[k]`` is the
    controller output at ``t[k]``, held until ``t[k+1]``; it reaches the block ``delay`` later.

    >>> t, temperature, power = simulate((0.0, 0.0))
    >>> float(temperature.max()), float(power.max())      # no gain, no heat
    (20.0, 0.0)

    Raises
    ------
    ProblemError
        For a wrong number of gains or a negative or non-finite gain.
    """
    kp, ki = _gains(params)
    steps, lag, decay, factor = _grid(heater)
    ambient, setpoint, top, dt = heater.ambient, heater.setpoint, heater.max_power, heater.step
    temperature = [ambient] * (steps + 1)
    power = [0.0] * (steps + 1)
    rise = 0.0  # temperature minus ambient
    integral = 0.0  # the integrator's share of the output, W
    target = setpoint - ambient
    for k in range(steps + 1):
        error = target - rise
        output = kp * error + integral
        held = top if output > top else (0.0 if output < 0.0 else output)
        integral = _integrate(integral, ki * error * dt, kp * error, top)
        power[k] = held
        if k == steps:
            break
        applied = power[k - lag] if k >= lag else 0.0
        rise = rise * decay + factor * applied
        temperature[k + 1] = ambient + rise
    t = np.arange(steps + 1) * dt
    return t, np.array(temperature), np.array(power)


def open_loop(power: float, heater: Heater = HEATER) -> tuple[np.ndarray, np.ndarray]:
    """Return time [s] and temperature [degC] for a constant ``power`` [W] switched on at 0.

    The analytic response is ``ambient + gain * power * (1 - exp(-(t - delay) / time_constant))``
    for ``t >= delay`` and ``ambient`` before; the grid values equal it up to rounding.

    Raises
    ------
    ProblemError
        For a non-finite or negative power.
    """
    if not (math.isfinite(power) and power >= 0):
        raise ProblemError(f"heater power must be >= 0 and finite, got {power!r}")
    steps, lag, decay, factor = _grid(heater)
    rise = np.zeros(steps + 1)
    for k in range(steps):
        applied = power if k >= lag else 0.0
        rise[k + 1] = rise[k] * decay + factor * applied
    return np.arange(steps + 1) * heater.step, heater.ambient + rise


def cost(
    params: Sequence[float] | Mapping[str, float] | np.ndarray, heater: Heater = HEATER
) -> float:
    """Return the tuning cost of the gains ``(Kp, Ki)``: mean squared error plus overshoot penalty.

    Both terms are in units of the setpoint step ``setpoint - ambient``: the mean over the grid
    (``t > 0``) of ``(error / step)**2``, plus ``overshoot_weight * (overshoot / step)**2``.  Zero
    gains cost exactly 1.

    Raises
    ------
    ProblemError
        As `simulate`.
    """
    _, temperature, _ = simulate(params, heater)
    span = heater.setpoint - heater.ambient
    error = (heater.setpoint - temperature[1:]) / span
    overshoot = max(0.0, float(np.max((temperature - heater.setpoint) / span)))
    return float(np.mean(error * error) + heater.overshoot_weight * overshoot * overshoot)
