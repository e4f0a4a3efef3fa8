"""Benchmark (prints figures, asserts nothing): event-to-page latency and the monitor's CPU use
while a run emits 1,000 events per second.

A synthetic run folder gets 1,000 events/s appended to its events.jsonl (in batches every 10 ms,
as a busy run's buffered event log writes them); a client reads the monitor's event stream, as the
page does, and notes when each event arrives. CPU: the monitor process's user+system time from
/proc over the window, as a share of one core.

    python3 tests/bench/bench_monitor.py [seconds]
"""

from __future__ import annotations

import http.client
import json
import os
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path


def _cpu_s(pid: int) -> float:
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def main(seconds: float = 10.0) -> None:
    root = Path(tempfile.mkdtemp(prefix="nb-monitor-bench-"))
    run = root / "20261202T000000Z_BENCH-1_load"
    (run / "live").mkdir(parents=True)
    (run / "run-folder.json").write_text("{}")
    (run / "live" / "status.json").write_text(json.dumps({"state": "running", "pid": os.getpid()}))
    events = run / "events.jsonl"
    events.write_text("")
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monitor = subprocess.Popen([sys.executable, "-m", "station", "monitor", str(root), "--port",
                                str(port)], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    latencies: list[float] = []
    stop = threading.Event()

    def reader() -> None:
        for _ in range(200):
            try:
                conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
                conn.request("GET", f"/api/runs/{run.name}/stream")
                reply = conn.getresponse()
                break
            except OSError:
                time.sleep(0.1)
        kind = None
        while not stop.is_set():
            line = reply.fp.readline().decode()
            if line.startswith("event:"):
                kind = line.split(":", 1)[1].strip()
            elif line.startswith("data:") and kind == "events":
                now = time.time()
                latencies.extend(now - e["wall"] for e in json.loads(line[5:]) if "wall" in e)

    thread = threading.Thread(target=reader, daemon=True)
    thread.start()
    time.sleep(3.0)  # the monitor starts and the stream opens
    cpu0, t0 = _cpu_s(monitor.pid), time.monotonic()
    seq = 0
    with events.open("a") as f:
        while time.monotonic() - t0 < seconds:
            for _ in range(10):
                seq += 1
                f.write(json.dumps({"type": "bench", "seq": seq, "wall": time.time()}) + "\n")
            f.flush()
            time.sleep(0.01)
    elapsed = time.monotonic() - t0
    time.sleep(1.0)
    cpu = (_cpu_s(monitor.pid) - cpu0) / elapsed
    stop.set()
    monitor.terminate()
    monitor.wait(10)
    lat = sorted(latencies)
    print(f"events written: {seq} in {elapsed:.1f} s ({seq / elapsed:.0f}/s); received: {len(lat)}")
    if lat:
        print(f"event-to-page latency: median {1000 * statistics.median(lat):.0f} ms, "
              f"p95 {1000 * lat[int(0.95 * (len(lat) - 1))]:.0f} ms, max {1000 * lat[-1]:.0f} ms "
              "(the stream polls every 250 ms)")
    print(f"monitor CPU: {100 * cpu:.1f} % of one core")


if __name__ == "__main__":
    main(float(sys.argv[1]) if len(sys.argv) > 1 else 10.0)
