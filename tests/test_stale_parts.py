"""Temporary ``.NAME.XXXXXXXX.part`` files left by a killed write are removed on the next write to the same place."""

from __future__ import annotations

import os
import tempfile

from fractalseq.io._outputs import PROCESS_START, remove_stale_parts, write_json


def _aged(path, seconds_before_start: float) -> None:
    """Give ``path`` a modification time before this process started (as a killed earlier run would have left it)."""
    t = PROCESS_START - seconds_before_start
    os.utime(path, (t, t))


def test_a_killed_writes_parts_go_and_nothing_else_does(tmp_path):
    # the names tempfile.mkstemp gives (8 random characters) are our exact temporary pattern
    fd, stale = tempfile.mkstemp(prefix=".result.json.", suffix=".part", dir=tmp_path)
    os.close(fd)
    _aged(stale, 60)
    keep = {
        ".result.json.short.part": 60,        # not 8 characters: not our pattern
        ".other.json.abcd1234.part": 60,      # a temporary file of another output
        "result.json.abcd1234.part": 60,      # no leading dot
        ".result.json.abcd1234.partial": 60,  # other suffix
        ".result.json.zzzz9999.part": -3600,  # ours, but newer than this process: maybe being written now
        "notes.txt": 60,
    }
    for name, age in keep.items():
        (tmp_path / name).write_text("x")
        _aged(tmp_path / name, age)

    write_json(tmp_path / "result.json", {"a": 1})

    names = sorted(p.name for p in tmp_path.iterdir())
    assert os.path.basename(stale) not in names
    assert names == sorted([*keep, "result.json"])
    assert (tmp_path / "result.json").read_text() == '{\n  "a": 1\n}\n'


def test_remove_stale_parts_counts_and_respects_the_limit(tmp_path):
    for i in range(3):
        p = tmp_path / f".r.csv.abc_123{i}.part"
        p.write_text("partial")
        _aged(p, 10)
    # with a limit before their time nothing is removed; with the process start all three are
    assert remove_stale_parts(tmp_path / "r.csv", before=PROCESS_START - 3600) == 0
    assert remove_stale_parts(tmp_path / "r.csv") == 3
    assert list(tmp_path.iterdir()) == []
    assert remove_stale_parts(tmp_path / "missing-folder" / "r.csv") == 0
