"""Atomic output files (balloonpath.fileio)."""

from __future__ import annotations

import os
import stat

import pytest

from balloonpath.fileio import atomic_path, atomic_write_bytes, atomic_write_text


def test_write_text_and_bytes(tmp_path):
    out = atomic_write_text(tmp_path / "sub" / "summary.json", "{\"a\": 1}\n")
    assert out.read_bytes() == b"{\"a\": 1}\n"
    atomic_write_bytes(out, b"\x00\x01")
    assert out.read_bytes() == b"\x00\x01"
    assert sorted(p.name for p in out.parent.iterdir()) == ["summary.json"]


def test_failure_leaves_no_file_and_no_temp(tmp_path):
    target = tmp_path / "track.csv"
    with pytest.raises(RuntimeError, match="writer failed"):
        with atomic_path(target) as tmp:
            tmp.write_text("half a fi")
            raise RuntimeError("writer failed")
    assert list(tmp_path.iterdir()) == []


def test_failure_keeps_the_previous_file(tmp_path):
    target = atomic_write_text(tmp_path / "flight.kml", "old")
    with pytest.raises(KeyboardInterrupt):
        with atomic_path(target) as tmp:
            tmp.write_text("new, unfinished")
            raise KeyboardInterrupt
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["flight.kml"]


def test_temporary_file_is_hidden_beside_the_target(tmp_path):
    # same folder (so the final rename is atomic), hidden, ".part" suffix (design.md)
    with atomic_path(tmp_path / "members.csv") as tmp:
        assert tmp.parent == tmp_path
        assert tmp.name.startswith(".members.csv.") and tmp.suffix == ".part"
        tmp.write_bytes(b"x")
    assert (tmp_path / "members.csv").read_bytes() == b"x"


def test_permissions_follow_the_umask(tmp_path):
    old = os.umask(0o022)
    os.umask(old)
    out = atomic_write_text(tmp_path / "report.html", "<p>hi</p>")
    assert stat.S_IMODE(out.stat().st_mode) == 0o666 & ~old
