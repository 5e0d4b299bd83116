"""A small cooling-rod simulator, run as an external program (invented measurements).

    python3 rod.py --conductivity=170 --coefficient=12

prints the simulated temperatures and, last, the misfit against the invented thermocouple
readings.  The model is `directional.testproblems.cooling_rod` (a transient fin equation solved
by finite differences); this script only runs it, as any program of your own would be run.
"""

import sys

from directional.testproblems.cooling_rod import main

if __name__ == "__main__":
    sys.exit(main())
