"""Benchmark: ``castline run`` with ``compute.scheduler``, a local Dask cluster, against the run
on this machine alone.

    .venv/bin/python benchmarks/bench_cluster.py [--series 50000] [--local-series 5000]
                                                 [--months 120] [--drivers 6] [--workers 2]

Not a test. Data: the simulated panel of bench_many_series (seeded numpy, no reference value
in it), written as Parquet; the spec is bench_many_series' (OLS per series beside the mean
and same-month-last-year baselines; rolling origin, expanding, 12 origins, horizon 3). The
benchmark starts a Dask LocalCluster (--workers processes, one thread each) in its own
process, then times whole processes, as a user runs them:

  (a) ``castline run`` on --series series with ``compute: {scheduler: ADDRESS}``: the client;
  (b) ``castline run`` on --local-series series in one process, no cluster.

It prints each one's wall time, its own peak memory (os.wait4: the client's, not the
workers'), the time per series of each, and the two target lines of issue 21 (the client
under 3 GB; time per series at most 1.5x that of the local run), marked met or MISSED,
never asserted. What runs on the cluster today is the fits per series; the windows' feature
plans, the baselines, the evaluation and the data itself stay with the client.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_many_series import HORIZON, ORIGINS, write_spec, written_panel  # noqa: E402  (the same panel and spec)
from bench_run import timed_process  # noqa: E402  (a whole process, its time and peak memory)

TARGET_CLIENT_MB, TARGET_PER_SERIES = 3072, 1.5


def panel_spec(folder: Path, args: argparse.Namespace, series: int, scheduler: str | None) -> Path:
    """Write the panel of ``series`` series and its spec in ``folder``; return the spec."""
    folder.mkdir()
    _, drivers = written_panel(folder, argparse.Namespace(**{**vars(args), "series": series}))
    spec = write_spec(folder, drivers, args.months - ORIGINS - HORIZON + 1, workers=1)
    if scheduler:
        spec.write_text(spec.read_text(encoding="utf-8").replace(
            "compute:\n  workers: 1\n", f"compute:\n  scheduler: {scheduler}\n"), encoding="utf-8")
        assert "scheduler" in spec.read_text(encoding="utf-8")
    return spec


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=50_000)
    parser.add_argument("--local-series", type=int, default=5_000)
    parser.add_argument("--months", type=int, default=120)
    parser.add_argument("--drivers", type=int, default=6)
    parser.add_argument("--workers", type=int, default=2, help="Dask worker processes")
    args = parser.parse_args()
    from dask.distributed import LocalCluster

    print(f"data: {args.series:,} series (cluster) and {args.local_series:,} (local) x {args.months} months "
          f"x {args.drivers} drivers; rolling origin, expanding, {ORIGINS} origins, horizon {HORIZON}; "
          "OLS per series + mean + same month last year")
    with tempfile.TemporaryDirectory(prefix="castline-bench-cluster-") as tmp, \
            LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True,
                         dashboard_address=None) as cluster:
        folder = Path(tmp)
        spec = panel_spec(folder / "cluster", args, args.series, cluster.scheduler_address)
        run, client_mb, text = timed_process(["-m", "pipeline", "run", str(spec)], spec.parent)
        assert "run folder:" in text
        spec = panel_spec(folder / "local", args, args.local_series, None)
        local, local_mb, _ = timed_process(["-m", "pipeline", "run", str(spec)], spec.parent)

    per_cluster, per_local = run / args.series * 1000, local / args.local_series * 1000
    print(f"\n(a) castline run, Dask cluster of {args.workers} workers   {run:8.2f} s   client peak "
          f"{client_mb:7,.0f} MB   {per_cluster:.2f} ms per series")
    print(f"(b) castline run, this machine alone          {local:8.2f} s   peak {local_mb:7,.0f} MB   "
          f"{per_local:.2f} ms per series")
    print(f"\nclient peak memory = {client_mb:,.0f} MB (target < {TARGET_CLIENT_MB:,} MB: "
          f"{'met' if client_mb < TARGET_CLIENT_MB else 'MISSED'})")
    ratio = per_cluster / per_local
    print(f"time per series, cluster / local = {ratio:.2f}x (target <= {TARGET_PER_SERIES:g}x: "
          f"{'met' if ratio <= TARGET_PER_SERIES else 'MISSED'})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
