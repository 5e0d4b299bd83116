"""The heater example's objective: the tuning cost of PI gains on a simulated heater.

The plant (a heated aluminium block with a dead time, power limited to 60 W) and the cost (mean
squared error plus an overshoot penalty, in units of the setpoint step) are in
`directional.testproblems.heater`; every number there is invented for the example.
"""

import numpy as np

from directional.testproblems import heater


def cost(x: np.ndarray) -> float:
    """Tuning cost of the gains x = (Kp, Ki); lower is better, zero gains cost 1."""
    return heater.cost(x)
