"""The simulators' wire protocol over a plain TCP socket: `\\n` and `\\r\\n` accepted, exactly one
reply line per command, error replies for unknown commands and out-of-limit settings (the rule
of drivers/protocol.py)."""

from __future__ import annotations

import socket

import pytest

from drivers.clock import SimClock
from drivers.protocol import (
    BLACKBODY_COMMANDS,
    STAGE_COMMANDS,
    WHEEL_COMMANDS,
    parse_error,
)
from simulators.bench import SimBench
from simulators.servers import start_bench_servers


@pytest.fixture
def servers():
    clock = SimClock()
    bench = SimBench.from_mapping({}, clock, seed=0)
    with start_bench_servers(bench) as s:
        yield s


def _talk(port: int, payload: bytes, lines: int) -> list[str]:
    with socket.create_connection(("127.0.0.1", port), timeout=2.0) as sock:
        sock.sendall(payload)
        buf = b""
        while buf.count(b"\n") < lines:
            chunk = sock.recv(4096)
            assert chunk, "server closed early"
            buf += chunk
    return buf.decode().splitlines()


def test_crlf_and_lf_each_get_one_reply(servers):
    replies = _talk(servers.ports["blackbody"], b"*IDN?\r\nSOUR:TEMP 30\nSOUR:SETP?\r\n", 3)
    assert replies == ["nightbench simulator,simulated blackbody,NB-SIM-BB,1.0", "OK", "30.0000"]


def test_out_of_limit_move_refused_with_error_reply(servers):
    replies = _talk(servers.ports["stage"], b"MOVE az 46\nSYST:ERR?\nPOS? az\nFOO\n", 4)
    code, message = parse_error(replies[0])
    assert code == 200 and "soft limits" in message       # demo bench: +-45 deg soft
    assert replies[1].startswith("200,") and replies[2] == "0.0000"
    assert parse_error(replies[3])[0] == 100


@pytest.mark.parametrize("kind,table", [("blackbody", BLACKBODY_COMMANDS),
                                        ("wheel", WHEEL_COMMANDS), ("stage", STAGE_COMMANDS)])
def test_every_query_in_the_table_answers(servers, kind, table):
    args = {"AXIS:LIM?": " az", "AXIS:STAT?": " az", "POS?": " az", "MOV?": " az"}
    queries = [c.header + args.get(c.header, "") for c in table if c.is_query]
    replies = _talk(servers.ports[kind], "".join(q + "\n" for q in queries).encode(), len(queries))
    assert len(replies) == len(queries)
    assert all(parse_error(r) is None for r in replies), replies


def test_close_frees_the_port_and_is_idempotent():
    bench = SimBench.from_mapping({}, SimClock())
    s = start_bench_servers(bench)
    port = s.ports["wheel"]
    s.close()
    s.close()
    with pytest.raises(OSError):
        socket.create_connection(("127.0.0.1", port), timeout=0.5).close()


def test_from_mapping_reads_station_style_axes_and_rejects_unknown_keys():
    bench = SimBench.from_mapping({"stage": {"x": {"min": -10, "max": 10, "velocity": 5,
                                                   "acceleration": 10}}}, SimClock())
    assert bench.stage_angles() == {"x": 0.0}
    with pytest.raises(ValueError, match="unknown key"):
        SimBench.from_mapping({"blackbod": {}}, SimClock())
