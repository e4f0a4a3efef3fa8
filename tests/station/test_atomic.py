"""Atomic writes, checksums and free-disk checks (station.record.atomic)."""

from __future__ import annotations

import errno
import hashlib
import json
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from station.record import atomic
from station.record.atomic import (DiskFullError, check_free_space, dumps_json, free_bytes, sha256_file,
                            write_bytes_atomic, write_json_atomic, write_text_atomic)

# FIPS 180-2, Appendix B (SHA-256 examples): "abc" and one million "a".
FIPS_ABC = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
FIPS_MILLION_A = "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"


def test_sha256_file_matches_fips_180_2_vectors(tmp_path: Path) -> None:
    small = write_bytes_atomic(tmp_path / "abc.bin", b"abc")
    big = write_bytes_atomic(tmp_path / "a.bin", b"a" * 1_000_000)
    assert sha256_file(small) == FIPS_ABC
    # A 4 KiB chunk size makes the read cross 245 chunk boundaries, the last one partial.
    assert sha256_file(big, chunk=4096) == FIPS_MILLION_A


def test_sha256_file_agrees_with_hashlib_on_random_data(tmp_path: Path) -> None:
    data = np.random.default_rng(7).integers(0, 256, 3_000_001, dtype=np.uint8).tobytes()
    path = write_bytes_atomic(tmp_path / "r.bin", data)
    assert sha256_file(path) == hashlib.sha256(data).hexdigest()  # reference: Python hashlib
    assert path.stat().st_size == 3_000_001


def test_json_is_sorted_indented_and_numpy_values_are_plain(tmp_path: Path) -> None:
    obj = {"b": np.float32(1.5), "a": np.arange(3, dtype=np.int16), "c": np.bool_(True),
           "nan": float("nan"), "path": Path("frames/x.tif")}
    path = write_json_atomic(tmp_path / "x.json", obj)
    text = path.read_text()
    # RFC 8259 has no NaN: a non-finite float is stored as null so every JSON reader accepts it.
    assert "NaN" not in text
    back = json.loads(text)
    assert back == {"a": [0, 1, 2], "b": 1.5, "c": True, "nan": None, "path": "frames/x.tif"}
    assert text.index('"a"') < text.index('"b"') < text.index('"c"')
    assert text.splitlines()[1].startswith('  "a"')  # indent 2
    assert text.endswith("}\n")


def test_failed_rename_leaves_old_content_and_no_temp_file(tmp_path: Path,
                                                           monkeypatch: pytest.MonkeyPatch) -> None:
    target = write_text_atomic(tmp_path / "m.json", "old")

    def broken_replace(src: str, dst: str) -> None:
        raise OSError(errno.EIO, "simulated I/O error")

    monkeypatch.setattr(os, "replace", broken_replace)
    with pytest.raises(OSError):
        write_text_atomic(target, "new content")
    monkeypatch.undo()
    assert target.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.json"]


def test_kill_9_during_rewrites_leaves_one_whole_version(tmp_path: Path) -> None:
    """POSIX rename(2) replaces the name atomically: after SIGKILL the file is one whole version."""
    target = tmp_path / "state.json"
    child = textwrap.dedent(f"""
        import sys
        from station.record.atomic import write_json_atomic
        for i in range(100000):
            write_json_atomic({str(target)!r}, {{"i": i, "pad": "x" * (20000 + (i % 7) * 3000)}})
            print(i, flush=True)
    """)
    proc = subprocess.Popen([sys.executable, "-c", child], stdout=subprocess.PIPE, text=True)
    acknowledged = -1
    for line in proc.stdout:  # event driven: kill once 30 rewrites were acknowledged
        acknowledged = int(line)
        if acknowledged >= 30:
            break
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    proc.stdout.close()
    data = json.loads(target.read_text())
    assert data["i"] >= acknowledged
    assert len(data["pad"]) == 20000 + (data["i"] % 7) * 3000


def test_check_free_space_threshold_is_exact(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.setattr(atomic, "free_bytes", lambda path: 1100)
    assert check_free_space(tmp_path, 1000, margin=0.1) == 1100  # needs 1000 * 1.1 = 1100
    monkeypatch.setattr(atomic, "free_bytes", lambda path: 1099)
    with pytest.raises(DiskFullError) as info:
        check_free_space(tmp_path, 1000, margin=0.1, what="the plan's frames")
    err = info.value
    assert (err.needed, err.free) == (1100, 1099)
    assert err.errno == errno.ENOSPC  # POSIX "No space left on device"
    assert str(tmp_path) in str(err) and "the plan's frames" in str(err)
    monkeypatch.setattr(atomic, "free_bytes", lambda path: 5000)
    with pytest.raises(DiskFullError):
        check_free_space(tmp_path, 1000, margin=4096)  # absolute margin: needs 5096


def test_free_bytes_agrees_with_statvfs(tmp_path: Path) -> None:
    st = os.statvfs(tmp_path)  # reference: POSIX statvfs, blocks available to unprivileged users
    reference = st.f_bavail * st.f_frsize
    # Other processes write meanwhile: allow 64 MiB of drift between the two readings.
    assert abs(free_bytes(tmp_path) - reference) < 64 * 1024 * 1024
    assert abs(free_bytes(tmp_path / "not" / "yet") - reference) < 64 * 1024 * 1024


def test_write_reports_disk_full_as_disk_full_error(tmp_path: Path,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    real_fdopen = os.fdopen

    class Full:
        def __init__(self, fh):  # type: ignore[no-untyped-def]
            self.fh = fh

        def __enter__(self):  # type: ignore[no-untyped-def]
            return self

        def __exit__(self, *exc):  # type: ignore[no-untyped-def]
            self.fh.close()

        def write(self, data: bytes) -> int:
            raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "fdopen", lambda fd, mode: Full(real_fdopen(fd, mode)))
    with pytest.raises(DiskFullError) as info:
        write_bytes_atomic(tmp_path / "r.json", b"x" * 10)
    assert info.value.needed == 10
    assert list(tmp_path.iterdir()) == []


def test_dumps_json_compact_form_is_one_line() -> None:
    text = dumps_json({"z": 1, "a": [1, 2]}, indent=None)
    assert text == '{"a":[1,2],"z":1}'
