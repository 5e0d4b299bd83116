"""``directional demo``: calibrate a batch-bioreactor model to invented data, end to end.

The scenario is our own (`directional.testproblems.bioreactor`): Monod growth with decay, an ODE
solved with `scipy.integrate.solve_ivp`, four constants fitted to an INVENTED, noisy data set of
biomass and substrate.  The demo writes, into ``./directional-demo/``:

- ``problem.toml``: the problem file it runs (edit it and ``directional run`` it);
- ``data.csv``: a copy of the invented data;
- ``journal.sqlite``: every evaluation (``directional show`` / ``resume`` read it);
- ``summary.txt``, ``solution.json``: the result for people and for programs;
- ``plots/*.png``: the search, the profiles, the fit and the residuals;
- ``report.html``: all of it in one self-contained page to open, print or send.

`residuals` and `fit` are the functions the problem file names (``directional.interface.demo:residuals``).
The command line runs it (`cli`): `prepare` writes the files, then the problem file is run as
``directional run`` would.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from directional.testproblems import bioreactor

FOLDER = "directional-demo"
TITLE = "Batch culture (invented data): Monod growth constants"
NOTICE = "  (the data are invented for this demo; they are not measurements)"

PROBLEM = f'''\
# The directional demo: calibrate a batch-bioreactor model (Monod growth with decay) to an
# INVENTED, noisy data set (data.csv; not measurements).  Run it again with
#     directional run {FOLDER}/problem.toml
title = "{TITLE}"

[[parameter]]
name = "mu_max"          # largest specific growth rate
start = 0.3
lower = 0.01
upper = 3.0
scale = "log"
unit = "1/h"

[[parameter]]
name = "Ks"              # half-saturation constant
start = 1.0
lower = 0.01
upper = 50.0
scale = "log"
unit = "g/L"

[[parameter]]
name = "Y"               # biomass yield on substrate
start = 0.4
lower = 0.05
upper = 1.0
unit = "g/g"

[[parameter]]
name = "kd"              # decay rate
start = 0.05
lower = 0.0001
upper = 0.5
scale = "log"
unit = "1/h"

[objective]
function = "directional.interface.demo:residuals"   # weighted residuals, model minus data over sigma
kind = "residuals"

[search]
budget = 1500
noise = "estimate"   # the ODE solver's error is noise at the scale of the Hessian's steps

[journal]
path = "journal.sqlite"

[report]
fit = "directional.interface.demo:fit"
'''


def residuals(x: np.ndarray) -> np.ndarray:
    """Weighted residuals of the bioreactor model against the bundled invented data.

    ``x = (mu_max, Ks, Y, kd)``; biomass then substrate, (model - data) / sigma.
    """
    return bioreactor.residuals(x)


def fit(x: np.ndarray) -> list[dict[str, Any]]:
    """The model at ``x`` against the bundled invented data, as series for `plots.write_plots`."""
    data = bioreactor.load_data()
    biomass, substrate = bioreactor.simulate(x, data.times, x0=data.x0, s0=data.s0)
    fine = np.linspace(0.0, float(data.times[-1]), 241)
    curve_biomass, curve_substrate = bioreactor.simulate(x, fine, x0=data.x0, s0=data.s0)
    common = {"x": data.times, "x_label": "time [h]", "unit": "g/L", "curve_x": fine,
              "data_label": "invented data"}
    return [
        {"name": "biomass X", "observed": data.biomass, "predicted": biomass,
         "sigma": data.sigma_biomass, "curve": curve_biomass, **common},
        {"name": "substrate S", "observed": data.substrate, "predicted": substrate,
         "sigma": data.sigma_substrate, "curve": curve_substrate, **common},
    ]


def prepare(folder: str | Path = FOLDER) -> Path:
    """Write the demo's problem file and data into ``folder``; remove an old demo journal.

    Returns the problem file's path.  Only the demo's own files are touched.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for name in ("journal.sqlite", "journal.sqlite-wal", "journal.sqlite-shm",
                 "journal.sqlite.lock"):
        (folder / name).unlink(missing_ok=True)
    problem = folder / "problem.toml"
    problem.write_text(PROBLEM, encoding="utf-8")
    data = resources.files("directional.testproblems").joinpath(bioreactor.DATA_FILE)
    (folder / "data.csv").write_text(data.read_text(encoding="utf-8"), encoding="utf-8")
    return problem
