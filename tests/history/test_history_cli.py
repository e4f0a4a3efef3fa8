"""The history commands as an engineer types them (SQLite beside the run folders), and how the
database is chosen."""

from __future__ import annotations

import csv
import datetime as dt
import io
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from sequences.yamlsource import SourceError
from station.cli.main import main
from station.history.db import ENV_VAR, resolve_url
from station.inputs.config import load_station
from tests.history.synthetic import make_run
from tests.station.fast_bench import fast_station_yaml

T0 = dt.datetime(2026, 2, 1, 21, 0)


@pytest.fixture
def runs(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.delenv(ENV_VAR, raising=False)
    monkeypatch.chdir(tmp_path)
    for i, netd in enumerate([44.0, 44.5, 43.8, 44.2, 53.0, 44.1]):
        make_run(tmp_path / "runs", serial=f"DEMO-{i:04d}", start=T0 + dt.timedelta(days=i),
                 netd_mk=netd, pid=i)
    return tmp_path / "runs"

SVG = "{http://www.w3.org/2000/svg}"


def test_index_runs_trend_compare_report(runs: Path, capsys: pytest.CaptureFixture) -> None:
    assert main(["index", str(runs)]) == 0
    assert "6 runs added" in capsys.readouterr().out
    assert main(["index", str(runs)]) == 0
    assert "0 runs added, 6 already recorded" in capsys.readouterr().out
    assert (runs / "history.sqlite").is_file()

    assert main(["runs", "--csv", "--outcome", "FAILED"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert [r["uut_serial"] for r in rows] == ["DEMO-0004"]

    assert main(["trend", "netd_mk", "--csv", "--plot", "chart.svg"]) == 0
    out = capsys.readouterr().out
    table = list(csv.DictReader(io.StringIO(out.split("n=")[0])))
    assert [float(r["value"]) for r in table] == [44.0, 44.5, 43.8, 44.2, 53.0, 44.1]
    assert "spec limit: <= 50" in out
    chart = ET.parse("chart.svg").getroot()  # the chart is SVG: one marker per run
    (values,) = [g for g in chart.iter(f"{SVG}g") if g.get("class") == "values"]
    assert len(values) == 6 and float(chart.get("width")) > 400
    assert main(["trend", "netd_mk", "--plot", "chart.png"]) == 2  # refused, said why
    assert "written as SVG" in capsys.readouterr().out and not Path("chart.png").exists()

    folders = sorted(p for p in runs.iterdir() if p.is_dir())
    assert main(["compare", str(folders[0]), str(folders[4]), "--csv"]) == 0
    netd = next(r for r in csv.DictReader(io.StringIO(capsys.readouterr().out))
                if r["figure"] == "netd_mk")
    assert float(netd["B - A"]) == pytest.approx(9.0) and netd["significant"] == "SIGNIFICANT"

    assert main(["report", str(folders[0])]) == 0
    assert (folders[0] / "report.html").is_file()


def test_unknown_figure_names_the_ones_recorded(runs: Path, capsys) -> None:
    main(["index", str(runs)])
    capsys.readouterr()
    assert main(["trend", "netd_m"]) == 2
    assert "netd_mk" in capsys.readouterr().out


def test_not_a_run_folder_is_a_clear_message(tmp_path: Path, capsys) -> None:
    assert main(["report", str(tmp_path)]) == 2
    assert "no manifest.json here" in capsys.readouterr().out


def test_database_chosen_by_precedence(tmp_path: Path) -> None:
    station = tmp_path / "station.yaml"
    station.write_text(fast_station_yaml("Bay 3", timeout_s=1.0)
                       + 'history: {url: "postgresql://bench@lab-db/nightbench"}\n')
    assert load_station(station).history_url == "postgresql://bench@lab-db/nightbench"
    env = {ENV_VAR: "sqlite:////srv/history.sqlite"}
    assert resolve_url(explicit="sqlite:///x.sqlite", station_file=station, environ=env) == \
        "sqlite:///x.sqlite"
    assert resolve_url(station_file=station, environ=env) == "sqlite:////srv/history.sqlite"
    assert resolve_url(station_file=station, environ={}) == \
        "postgresql+psycopg://bench@lab-db/nightbench"
    assert resolve_url(runs_dir=tmp_path / "runs", environ={}) == \
        f"sqlite:///{tmp_path / 'runs' / 'history.sqlite'}"


def test_station_file_history_key_is_checked(tmp_path: Path) -> None:
    station = tmp_path / "station.yaml"
    station.write_text(fast_station_yaml("Bay 3", timeout_s=1.0) + "history: {url: 42}\n")
    with pytest.raises(SourceError) as err:
        load_station(station)
    assert any("'url' must be a non-empty text" in p.message for p in err.value.problems)
