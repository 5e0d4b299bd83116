"""A cooling-rod simulator run as an external program: input deck in, output table out.

    python3 rod_sim.py            # in a folder holding rod.in; writes temperatures.csv

It reads ``rod.in`` (``key = value`` lines, ``#`` comments), solves the transient fin equation
of `directional.testproblems.cooling_rod` for the conductivity and the surface heat-transfer
coefficient in the deck, and writes ``temperatures.csv``: one row per reading time, one column
per thermocouple.  It knows nothing of the measurements; `directional` compares its table with
the (invented) readings in ``readings.csv``.
"""

import sys

from directional.testproblems.cooling_rod import POSITIONS, TIMES, simulate


def read_deck(path: str) -> dict[str, float]:
    values = {}
    with open(path) as deck:
        for line in deck:
            line = line.split("#", 1)[0].strip()
            if line:
                key, _, value = line.partition("=")
                values[key.strip()] = float(value)
    return values


def main() -> int:
    deck = read_deck("rod.in")
    table = simulate(deck["conductivity"], deck["coefficient"], cells=int(deck["cells"]),
                     step=deck["step"])
    with open("temperatures.csv", "w") as out:
        out.write("time_s," + ",".join(f"T_{round(100 * x)}cm" for x in POSITIONS) + "\n")
        for t, row in zip(TIMES, table):
            out.write(f"{t:g}," + ",".join(repr(float(v)) for v in row) + "\n")
    print(f"rod_sim: {len(TIMES)} rows written to temperatures.csv")
    return 0


if __name__ == "__main__":
    sys.exit(main())
