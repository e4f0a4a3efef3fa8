"""History benchmark: trend query time over 100,000 recorded runs, and indexing throughput, on
SQLite and on PostgreSQL (a throw-away server started in a temporary folder, as the tests do).

Not a test: run `python3 tests/bench/bench_history.py [RUNS] [FOLDERS]` from the repository root
(defaults 100000 runs in the database, 1000 run folders to index).

The 100,000 runs are written straight into the tables (bulk insert: 100 serials of one model,
five figures and one verdict each, one run every 20 minutes); the trend asked for is one figure
of that model over all of them (`nightbench trend netd_mk --model ...`), timed as the median of
five calls after one warm-up. Indexing throughput reads and records synthetic run folders
(manifest, UUT file, results JSON) with `index_runs`, the code `nightbench index` runs.
"""

from __future__ import annotations

import datetime as dt
import random
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from sqlalchemy import insert  # noqa: E402

from station.history.db import open_engine  # noqa: E402
from station.history.index import index_runs, run_folders  # noqa: E402
from station.history.models import FigureRow, Run, VerdictEntry  # noqa: E402
from station.history.queries import RunFilter, trend  # noqa: E402
from tests.history.pg_server import find_bindir, start_server  # noqa: E402
from tests.history.synthetic import MODEL, make_run  # noqa: E402

CHUNK = 5000


def fill(engine, n_runs: int) -> float:
    """Bulk-insert n_runs runs with their figures and verdicts; returns seconds taken."""
    rng = random.Random(1)
    t0 = time.perf_counter()
    start = dt.datetime(2020, 1, 1)
    now = dt.datetime(2026, 1, 1)
    for base in range(0, n_runs, CHUNK):
        ids = range(base + 1, min(base + CHUNK, n_runs) + 1)
        runs, figures, verdicts = [], [], []
        for i in ids:
            serial = f"DEMO-{i % 100:04d}"
            started = start + dt.timedelta(minutes=20 * i)
            netd = rng.gauss(44.0, 1.0)
            runs.append({"id": i, "run_uid": f"bench-{i}", "folder": f"/runs/bench-{i}",
                         "uut_model": MODEL, "uut_serial": serial, "station": "Bay 2",
                         "recipe": "sitf-sweep", "host": "bench-a", "software_version": "0.1.0",
                         "started_at": started, "ended_at": started + dt.timedelta(hours=1),
                         "state": "complete", "cause": "all steps done", "outcome": "PASSED",
                         "n_pass": 1, "n_marginal": 0, "n_fail": 0, "indexed_at": now})
            for name, value in (("netd_mk", netd), ("netd.netd_mk", netd),
                                ("netd.temporal_noise_counts", rng.gauss(4.9, 0.1)),
                                ("distortion.efl_mm", rng.gauss(25.0, 0.01)),
                                ("distortion.model.k1", rng.gauss(-0.25, 0.004))):
                figures.append({"run_id": i, "name": name, "analysis": name.split(".")[0],
                                "value": value, "sigma": 1.0, "unit": ""})
            verdicts.append({"run_id": i, "key": "netd_mk", "quantity": "NETD",
                             "analysis": "netd", "value": netd, "sigma": 1.0, "unit": "mK",
                             "limit": 50.0, "sense": "max", "margin": 50.0 - netd,
                             "status": "PASS", "conditions": {}})
        with engine.begin() as conn:
            conn.execute(insert(Run), runs)
            conn.execute(insert(FigureRow), figures)
            conn.execute(insert(VerdictEntry), verdicts)
    return time.perf_counter() - t0


def time_trend(engine) -> tuple[float, int]:
    filt = RunFilter(model=MODEL)
    trend(engine, "netd_mk", filt)  # warm-up (caches, query plan)
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        t = trend(engine, "netd_mk", filt)
        times.append(time.perf_counter() - t0)
    return statistics.median(times), len(t.points)


def time_indexing(url: str, folders: Path) -> tuple[float, int]:
    engine = open_engine(url)
    t0 = time.perf_counter()
    summary = index_runs(engine, run_folders(folders))
    return time.perf_counter() - t0, summary.added


def make_folders(root: Path, n: int) -> Path:
    for i in range(n):
        make_run(root, serial=f"DEMO-{i % 97:04d}", start=dt.datetime(2026, 1, 1)
                 + dt.timedelta(minutes=17 * i), netd_mk=40.0 + (i % 11), gathered=i % 2 == 0,
                 pid=i)
    return root


def bench(label: str, url_for, n_runs: int, folders: Path) -> None:
    engine = open_engine(url_for("big"))
    fill_s = fill(engine, n_runs)
    q_s, points = time_trend(engine)
    engine.dispose()
    idx_s, added = time_indexing(url_for("idx"), folders)
    print(f"{label:10s} fill {n_runs} runs {fill_s:6.1f} s | trend over {points} runs: "
          f"{q_s * 1000:7.1f} ms (median of 5) | index {added} folders: {idx_s:5.2f} s = "
          f"{added / idx_s:6.0f} runs/s")


def main(n_runs: int = 100_000, n_folders: int = 1000) -> None:
    work = Path(tempfile.mkdtemp(prefix="nightbench-bench-"))
    try:
        folders = make_folders(work / "runs", n_folders)
        bench("SQLite", lambda name: f"sqlite:///{work / (name + '.sqlite')}", n_runs, folders)
        bindir = find_bindir()
        if bindir is None:
            print("PostgreSQL: server binaries not found, skipped")
            return
        server = start_server(bindir)
        try:
            bench("PostgreSQL", server.create_database, n_runs, folders)
        finally:
            server.stop()
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
