"""Speed-up of equiscan.dask.extract from 1 to 2 worker processes, and peak memory per worker.

    python tools/python/bench/extract_workers.py [STATION] [--radius R] [--grid N] [--rounds K]

Cuts an N x N grid of LAS tiles (edges at the quantiles of x and y) from STATION (default scans/depot_station1.laz) into a
temporary folder, then runs extract over them on a LocalCluster of 1 and of 2 worker
processes (one thread each, one thread per task), alternating, K rounds, each run into a
fresh OUTDIR. Prints the wall-clock seconds of each run, the medians and their ratio, and
each worker's CPU seconds during the run and peak resident size (getrusage of the worker
process). On a machine whose CPU share is fixed (shared with other jobs) the wall-clock ratio
says little; the CPU seconds of one worker over those of the busier of two is the speed-up
that two free cores would give.
"""

import argparse
import os
import resource
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

import equiscan
import equiscan.dask
from distributed import Client, LocalCluster


def cut(station, folder, n):
    # Cell edges at the quantiles of x and of y: a terrestrial station is dense near the
    # scanner, so equal-width cells would put most points in one tile and leave nothing to
    # share between workers.
    scan = equiscan.read(station)
    q = np.linspace(0, 1, n + 1)[1:-1]
    cell = np.stack(
        [np.searchsorted(np.quantile(scan.local[:, k], q), scan.local[:, k], side="right")
         for k in (0, 1)],
        axis=1,
    )
    sizes = []
    for cx in range(n):
        for cy in range(n):
            m = (cell[:, 0] == cx) & (cell[:, 1] == cy)
            equiscan.write(
                folder / f"tile_{cx}_{cy}.las",
                scan.local[m],
                origin=scan.origin,
                attributes={k: v[m] for k, v in scan.attributes.items()},
            )
            sizes.append(int(m.sum()))
    return len(scan), sizes


def worker_usage():
    """Peak resident size (MB) and CPU seconds (user + system) of this worker process."""
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_maxrss / 1024, r.ru_utime + r.ru_stime


def one_run(tiles, out, workers, radius):
    with LocalCluster(
        n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0"
    ) as cluster, Client(cluster) as client:
        before = client.run(worker_usage)
        t = time.perf_counter()
        s = equiscan.dask.extract(tiles, out, radius=radius, client=client)
        seconds = time.perf_counter() - t
        after = client.run(worker_usage)
        # Peak resident size, and CPU seconds of the run alone (worker start-up excluded).
        usage = sorted((after[w][0], after[w][1] - before[w][1], before[w][0]) for w in after)
    assert s["exit_code"] == 0, s
    return seconds, usage, s


def main():
    repo = Path(__file__).resolve().parents[3]
    ap = argparse.ArgumentParser()
    ap.add_argument("station", nargs="?", default=str(repo / "scans" / "depot_station1.laz"))
    ap.add_argument("--radius", type=float, default=0.1)
    ap.add_argument("--grid", type=int, default=6)
    ap.add_argument("--rounds", type=int, default=3)
    a = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        tiles = tmp / "tiles"
        tiles.mkdir()
        total, sizes = cut(a.station, tiles, a.grid)
        print(f"{a.grid} x {a.grid} tiles, {total} points (largest tile {max(sizes)}), "
              f"radius {a.radius}, {os.cpu_count()} cores", flush=True)
        times = {1: [], 2: []}
        cpu_one = []
        balance = []
        peak = 0.0
        for r in range(a.rounds):
            for w in (1, 2):
                load = os.getloadavg()[0]
                sec, usage, s = one_run(tiles, tmp / f"out_{r}_{w}", w, a.radius)
                times[w].append(sec)
                peak = max([peak] + [u[0] for u in usage])
                cpu = [u[1] for u in usage]
                if w == 1:
                    cpu_one.append(cpu[0])
                else:
                    # The speed-up two free cores would give: the CPU seconds of one worker
                    # doing everything over those of the busier of two (halo reads that one
                    # worker's cache would have saved included).
                    balance.append(statistics.median(cpu_one) / max(cpu))
                print(f"round {r + 1}, {w} worker(s): {sec:.2f} s wall (load {load:.1f}), "
                      f"{s['points'] / sec:,.0f} points/s, halo points {s['halo_points']}, "
                      f"CPU per worker {', '.join(f'{c:.1f} s' for c in cpu)}, "
                      f"peak RSS per worker {', '.join(f'{u[0]:.0f} MB' for u in usage)} "
                      f"(idle before the run: {', '.join(f'{u[2]:.0f} MB' for u in usage)})",
                      flush=True)
        m1, m2 = statistics.median(times[1]), statistics.median(times[2])
        print(f"median wall: 1 worker {m1:.2f} s, 2 workers {m2:.2f} s, speed-up {m1 / m2:.2f}x")
        print(f"CPU of 1 worker / CPU of the busier of 2 (the speed-up on two free cores), "
              f"median: {statistics.median(balance):.2f}x")
        print(f"largest peak RSS of a worker: {peak:.0f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
