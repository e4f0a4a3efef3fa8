"""Query round-trip latency over loopback to the blackbody simulator, through pyvisa
(TCPIP SOCKET and ASRLsocket) and pyserial (socket://). Prints median and p99. Target: median
below 1 ms per query. Not a test: run `python3 tests/bench/bench_latency.py [N]`."""

from __future__ import annotations

import statistics
import sys
import time

from drivers.clock import SimClock
from drivers.transport import open_transport
from simulators.bench import SimBench
from simulators.servers import start_bench_servers


def measure(resource: str, clock: SimClock, n: int) -> list[float]:
    t = open_transport(resource, instrument="blackbody", clock=clock)
    try:
        for _ in range(50):  # warm-up
            t.query("MEAS:TEMP?")
        out = []
        for _ in range(n):
            t0 = time.perf_counter()
            t.query("MEAS:TEMP?", float)
            out.append(time.perf_counter() - t0)
        return out
    finally:
        t.close()


def main(n: int = 2000) -> None:
    clock = SimClock()
    bench = SimBench.from_mapping({}, clock)
    with start_bench_servers(bench) as servers:
        print(f"{n} queries of MEAS:TEMP? per transport (loopback, one client at a time)")
        for label, style in (("pyvisa TCPIP::SOCKET", "visa"), ("pyvisa ASRLsocket", "asrl"),
                             ("pyserial socket://", "serial")):
            samples = sorted(measure(servers.resource("blackbody", style), clock, n))
            median = statistics.median(samples) * 1e3
            p99 = samples[int(0.99 * (len(samples) - 1))] * 1e3
            verdict = "ok" if median < 1.0 else "ABOVE 1 ms TARGET"
            print(f"  {label:22s} median {median:6.3f} ms   p99 {p99:6.3f} ms   {verdict}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 2000)
