"""Eight benches indexing the same 1,000 run folders into one PostgreSQL at once.

Each process opens the (empty) database itself, so the schema migration races too; every folder
is indexed by three of the processes at once (each walks its 375 folders in its own shuffled
order: 3,000 attempts). Afterwards every run is recorded exactly once, with all its figures and
verdicts, and the processes' "added" counts sum to 1,000.
"""

from __future__ import annotations

import datetime as dt
import os
import subprocess
import sys
import time
from pathlib import Path

from sqlalchemy import func, select

from station.history.db import open_engine
from station.history.models import FigureRow, Run, VerdictEntry
from tests.history.synthetic import make_run

RUNS = 1000
PROCESSES = 8
OVERLAP = 3  # processes racing for each folder
REPO = Path(__file__).resolve().parents[2]


def test_eight_processes_record_each_of_1000_runs_exactly_once(pg_server, tmp_path) -> None:
    start = dt.datetime(2026, 1, 1)
    for i in range(RUNS):
        make_run(tmp_path / "runs", serial=f"DEMO-{i % 97:04d}",
                 start=start + dt.timedelta(minutes=17 * i), netd_mk=40.0 + (i % 11),
                 gathered=i % 2 == 0, pid=i)
    url = pg_server.create_database("concurrent")
    env = dict(os.environ, PYTHONPATH=str(REPO))
    t0 = time.perf_counter()
    procs = [subprocess.Popen([sys.executable, "-m", "tests.history.index_worker", url,
                               str(tmp_path / "runs"), str(n), str(PROCESSES), str(OVERLAP)],
                              cwd=REPO, env=env,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for n in range(PROCESSES)]
    outputs = [p.communicate(timeout=120) for p in procs]
    elapsed = time.perf_counter() - t0
    assert [p.returncode for p in procs] == [0] * PROCESSES, [e[-800:] for _, e in outputs]
    counts = [tuple(int(x) for x in out.split()) for out, _ in outputs]
    assert sum(c[0] for c in counts) == RUNS  # each run added by exactly one process
    share = RUNS * OVERLAP // PROCESSES
    assert all(added + already == share and problems == 0 for added, already, problems in counts)
    engine = open_engine(url)
    with engine.connect() as conn:
        n_runs = conn.execute(select(func.count()).select_from(Run)).scalar()
        n_uids = conn.execute(select(func.count(func.distinct(Run.run_uid)))).scalar()
        n_figures = conn.execute(select(func.count()).select_from(FigureRow)).scalar()
        n_verdicts = conn.execute(select(func.count()).select_from(VerdictEntry)).scalar()
    assert (n_runs, n_uids, n_verdicts) == (RUNS, RUNS, RUNS)
    assert n_figures == RUNS * 5
    print(f"{PROCESSES} processes, {RUNS} folders x {OVERLAP}: {elapsed:.1f} s, "
          f"{RUNS * OVERLAP / elapsed:.0f} folder visits/s")
