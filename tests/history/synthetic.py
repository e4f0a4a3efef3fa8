"""Tiny synthetic run folders (manifest, UUT copy, results JSON) for the history tests.

The verdicts are made with analysis.verdicts.judge, as a run does; half the folders carry them
gathered in results/verdicts.json, the others inside results/netd.json, so both ways a run
writes its verdicts are read.
"""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path

from analysis.verdicts import judge, overall

MODEL = "nightbench demo imager LW-640"
NETD_LIMIT_MK = 50.0


def make_run(root: Path, *, serial: str, start: dt.datetime, netd_mk: float,
             netd_sigma_mk: float = 1.0, efl_mm: float = 25.0, recipe: str = "sitf-sweep",
             state: str = "complete", gathered: bool = False, pid: int = 1000,
             model: str = MODEL) -> Path:
    """One finished run folder; returns its path."""
    stamp = start.strftime("%Y%m%dT%H%M%SZ")
    run = root / f"{stamp}_{serial}_{recipe}"
    (run / "inputs").mkdir(parents=True)
    (run / "results").mkdir()
    (run / "inputs" / "uut__u.yaml").write_text(
        f"model: {model}\nserial: {serial}\nspec_limits: {{netd_mk: {NETD_LIMIT_MK}}}\n",
        encoding="utf-8")
    start_utc = start.strftime("%Y-%m-%dT%H:%M:%S.000Z")
    end_utc = (start + dt.timedelta(hours=1)).strftime("%Y-%m-%dT%H:%M:%S.000Z")
    manifest = {
        "format": "nightbench-manifest", "version": 1, "host": "bench-a",
        "software_version": "0.1.0", "python": "3.11", "platform": "test",
        "start_utc": start_utc, "end_utc": end_utc if state != "running" else None,
        "state": state, "cause": "all steps done" if state == "complete" else "stopped",
        "sessions": [{"kind": "start", "pid": pid, "started_utc": start_utc, "host": "bench-a"}],
        "inputs": {"uut": {"relpath": "inputs/uut__u.yaml", "name": "u.yaml"}},
        "plan": {"recipe": recipe, "station": "Bay 2", "uut_serial": serial}, "files": {},
    }
    (run / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    verdict = judge("netd_mk", "NETD", netd_mk, netd_sigma_mk, "mK", NETD_LIMIT_MK,
                    conditions={"source_c": 30.0, "background_c": 20.0})
    netd = {"netd_mk": netd_mk, "temporal_noise_counts": 4.9}
    if gathered:
        (run / "results" / "verdicts.json").write_text(json.dumps({
            "uut": {"model": model, "serial": serial},
            "verdicts": [dict(verdict.to_dict(), analysis="netd")],
            "outcome": overall([verdict])}), encoding="utf-8")
    else:
        netd["verdicts"] = [verdict.to_dict()]
    (run / "results" / "netd.json").write_text(json.dumps(netd), encoding="utf-8")
    (run / "results" / "distortion.json").write_text(json.dumps({
        "summary": {"efl_mm": efl_mm}, "model": {"k1": -0.25, "uncertainty": {"k1": 0.004}}}),
        encoding="utf-8")
    return run
