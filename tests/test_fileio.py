"""Atomic writes, safe file names, one-line errors."""

from __future__ import annotations

import os

import pytest

from compquant.errors import CompquantError, InputError
from compquant.fileio import atomic_write, safe_filename, write_text_atomic


def test_atomic_write_leaves_nothing_on_error(tmp_path):
    target = tmp_path / "out.json"
    write_text_atomic(target, "old")
    with pytest.raises(RuntimeError):
        with atomic_write(target) as fh:
            fh.write("new partial")
            raise RuntimeError("crash")
    assert target.read_text() == "old"
    assert sorted(os.listdir(tmp_path)) == ["out.json"]


@pytest.mark.parametrize("name", ["../../etc/passwd", "a/b\\c", "..", ".", "", "x\x00y\n", "<b>bold</b>",
                                  "é" * 300, "CON", "lot 7; rm -rf /"])
def test_safe_filename(name):
    s = safe_filename(name)
    assert s and len(s) <= 80
    assert "/" not in s and "\\" not in s and not s.startswith(".")
    assert s not in (".", "..")
    assert all(c.isalnum() or c in "._+-" for c in s)


def test_safe_filename_distinct_for_distinct_ids():
    assert safe_filename("lot/1") != safe_filename("lot_1")
    assert safe_filename("LOT-1") == "LOT-1"


def test_error_is_one_line():
    e = InputError("bad\nthing\x07", where="file.h5", fix="do\tthis")
    assert e.one_line() == "file.h5: bad thing\\x07; do this"
    assert isinstance(e, CompquantError)
