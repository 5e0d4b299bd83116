"""Explore the bioreactor calibration from 4 starts on a Dask cluster.

    python explore_on_dask.py                          # a LocalCluster of 2 workers, made here
    python explore_on_dask.py tcp://scheduler:8786     # your running Dask scheduler

The objective is the misfit of the bundled batch-culture model (Monod growth; the data are
invented for the demo, see `directional.testproblems.bioreactor`).  Every evaluation runs on a
Dask worker; the searches, the journal and the start map stay in this process.  Kill this script
and run it again: the journal replays what was done and the exploration goes on, nothing
evaluated twice.
"""

from __future__ import annotations

import sys
from pathlib import Path

import distributed

import directional as dl
from directional.report.maps import start_map
from directional.testproblems import bioreactor

HERE = Path(__file__).resolve().parent


def main(address: str | None) -> None:
    cluster = None
    if address is None:  # no scheduler given: a cluster of two local worker processes
        cluster = distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
        )
        address = cluster.scheduler_address
    try:
        with distributed.Client(address) as client:
            land = dl.explore(
                bioreactor.misfit,
                bioreactor.PARAMETERS,  # bounds and log scales; the first start is their start
                starts=4,
                seed=0,
                executor=client.get_executor(),
                journal=HERE / "runs" / "explore-bioreactor.sqlite",
            )
    finally:
        if cluster is not None:
            cluster.close()
    print(land.summary())
    picture = start_map(land, None, HERE / "runs" / "start-map.png")  # no extra evaluation
    print(f"start map: {picture}")


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else None)
