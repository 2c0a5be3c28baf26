"""The one atomic write: complete files only, ordinary permissions, nothing left on failure.

Check values: POSIX file-creation semantics (a new file gets 0666 less the umask; common
practice) and lidmelt's rule that a final name only ever holds a complete file.
"""

import os
import stat

import pytest

from lidmelt._files import atomic_path, atomic_paths, write_json_atomic


def test_written_file_has_the_mode_of_an_ordinary_new_file(tmp_path):
    mask = os.umask(0o022)
    os.umask(mask)
    target = tmp_path / "a.txt"
    with atomic_path(target) as temp:
        temp.write_text("x")
    plain = tmp_path / "plain.txt"
    plain.write_text("x")
    assert stat.S_IMODE(target.stat().st_mode) == stat.S_IMODE(plain.stat().st_mode)
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~mask


def test_failure_leaves_neither_the_target_nor_a_temporary_file(tmp_path):
    target = tmp_path / "b.json"
    target.write_text("old")

    def write_then_fail():
        with atomic_paths(target, tmp_path / "c.json") as (t1, t2):
            t1.write_text("new")
            t2.write_text("new")
            raise RuntimeError

    with pytest.raises(RuntimeError):
        write_then_fail()
    assert target.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["b.json"]


def test_temporary_name_is_unpredictable_and_keeps_the_suffix(tmp_path):
    names = []
    for _ in range(2):
        with atomic_path(tmp_path / "d.tif") as temp:
            names.append(temp.name)
            assert temp.suffix == ".tif"
            assert temp.parent == tmp_path
    assert names[0] != names[1]


def test_json_is_written_complete(tmp_path):
    path = write_json_atomic(tmp_path / "s.json", {"a": 1})
    assert path.read_text().endswith("}\n")
    with pytest.raises(ValueError, match="JSON compliant"):
        write_json_atomic(tmp_path / "t.json", {"a": float("nan")})
    assert not (tmp_path / "t.json").exists()
