"""One bench's indexing process for the concurrency test: index its share of the folders under
RUNS (folder i when (i + worker) % workers < overlap: each folder is raced for by `overlap`
processes) in a shuffled order, into the database at URL; print the summary."""

from __future__ import annotations

import random
import sys
from pathlib import Path

from station.history.db import open_engine
from station.history.index import index_runs, run_folders


def main(url: str, runs: str, worker: int, workers: int, overlap: int) -> None:
    folders = [f for i, f in enumerate(run_folders(Path(runs)))
               if (i + worker) % workers < overlap]
    random.Random(worker).shuffle(folders)
    summary = index_runs(open_engine(url), folders)
    print(f"{summary.added} {summary.already} {len(summary.problems)}")


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2], *(int(a) for a in sys.argv[3:6]))
