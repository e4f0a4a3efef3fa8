"""Reading a run folder's verdicts and fault episodes, on small hand-made files.

The verdicts are made with analysis.verdicts.judge (the project's decision rule: guarded
acceptance, U = 2u, GUM JCGM 100:2008 and ILAC-G8:09/2019), so the reader is checked against what
a run writes, whichever file it is in.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from analysis.verdicts import judge
from station.report.timeline import read_timeline
from station.report.verdict_rows import read_verdicts


def write(path: Path, data) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(data))


def test_gathered_verdicts_file_wins_over_the_results_files(tmp_path: Path) -> None:
    netd = judge("netd_mk", "NETD", 49.0, 1.0, "mK", 50.0, conditions={"source_c": 30.0})
    write(tmp_path / "results" / "netd.json", {"netd_mk": 49.0, "passed": True})
    write(tmp_path / "results" / "verdicts.json", {
        "uut": {"serial": "DEMO-1"}, "outcome": "PASSED",
        "verdicts": [dict(netd.to_dict(), analysis="netd")]})
    got = read_verdicts(tmp_path / "results", {"netd_mk": 50.0})
    assert got.source == "results/verdicts.json" and got.outcome == "PASSED"
    (row,) = got.rows
    # 49 +/- 1 against 50: the limit lies within value +/- 2u, so MARGINAL, margin 1 mK
    assert (row.status, row.margin, row.sigma, row.conditions) == ("MARGINAL", 1.0, 1.0,
                                                                   {"source_c": 30.0})


def test_every_older_results_form_is_read(tmp_path: Path) -> None:
    ok = judge("max_roll_deg", "roll", 0.15, 0.01, "deg", 0.5)
    write(tmp_path / "results" / "a_new.json", {"verdicts": [ok.to_dict()]})
    write(tmp_path / "results" / "distortion.json", {"verdicts": [
        {"name": "max_distortion_percent", "value": -3.4, "limit": 3.0, "passed": False}]})
    write(tmp_path / "results" / "netd.json", {"netd_mk": 51.4, "passed": False})
    got = read_verdicts(tmp_path / "results", {"netd_mk": 50.0})
    rows = {r.key: r for r in got.rows}
    assert rows["max_roll_deg"].status == "PASS" and rows["max_roll_deg"].margin == \
        ok.margin
    # a magnitude limit: |-3.4 %| is 0.4 % beyond 3 %
    assert rows["max_distortion_percent"].margin == pytest.approx(-0.4, abs=1e-12)
    assert (rows["netd_mk"].status, rows["netd_mk"].unit, rows["netd_mk"].limit) == (
        "FAIL", "mK", 50.0)
    assert got.outcome == "FAILED"


def test_no_verdict_is_not_judged(tmp_path: Path) -> None:
    write(tmp_path / "results" / "sitf.json", {"sitf_counts_per_k": 95.7})
    assert read_verdicts(tmp_path / "results").outcome == "NOT JUDGED"


def event(seq: int, t: float, type_: str, **fields) -> str:
    return json.dumps({"seq": seq, "t": t, "utc": f"T{t}", "type": type_, **fields})


def test_retries_are_told_as_one_episode_with_its_end(tmp_path: Path) -> None:
    lines = [
        event(1, 0.0, "state", source="idle", dest="running"),
        event(2, 5.0, "transport.retry", instrument="blackbody", command="MEAS:TEMP?",
              attempt=1, kind="timeout", error="no reply"),
        event(3, 5.2, "transport.reconnect", instrument="blackbody", command="MEAS:TEMP?",
              attempt=1),
        event(4, 5.5, "transport.retry", instrument="blackbody", command="MEAS:TEMP?",
              attempt=2, kind="timeout", error="no reply"),
        event(5, 6.0, "io", instrument="blackbody", command="MEAS:TEMP?", reply="30.0"),
        event(6, 9.0, "transport.retry", instrument="stage", command="POS? az", attempt=1,
              kind="timeout", error="no reply"),
        event(7, 9.5, "transport.give_up", instrument="stage", command="POS? az", attempts=2,
              kind="timeout", error="no reply"),
        event(8, 10.0, "state", source="running", dest="faulted", cause="stage not answering"),
    ]
    (tmp_path / "events.jsonl").write_text("\n".join(lines) + "\n")
    t = read_timeline(tmp_path)
    first, second = t.faults
    assert (first.retries, first.reconnects, first.recovered) == (2, 1, True)
    assert first.how == "retried 2x, reconnected 1x; recovered"
    assert not second.recovered and second.how.startswith("gave up after 2 attempts")
    assert [m.level for m in t.moments if m.kind == "state"] == ["info", "error"]
