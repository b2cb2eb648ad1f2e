"""dic.files: atomic writes leave the old file or the new one, never half a file or a temporary.

The guarantee rests on os.replace being atomic within one file system (POSIX rename(2);
common practice, no source).
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from dic.errors import FileProblem
from dic.files import (atomic_write, check_folder, lock_file, partial_name,
                       remove_stale_partials, unlock_file)


def _names(folder):
    return sorted(p.name for p in folder.iterdir())


def test_text_and_binary_writes_replace_the_target(tmp_path):
    target = tmp_path / "table.csv"
    target.write_text("old\n", encoding="utf-8")
    with atomic_write(target, newline="\n") as fh:
        fh.write("x,y\n1,2\n")
        assert target.read_text(encoding="utf-8") == "old\n"  # unchanged until the end
    assert target.read_bytes() == b"x,y\n1,2\n"
    with atomic_write(tmp_path / "blob.bin", "wb", fsync=False) as fh:
        fh.write(bytes(range(256)))
    assert (tmp_path / "blob.bin").read_bytes() == bytes(range(256))
    assert _names(tmp_path) == ["blob.bin", "table.csv"]


def test_path_mode_keeps_the_extension_for_writers_that_need_a_file_name(tmp_path):
    target = tmp_path / "map.png"
    with atomic_write(target, None) as tmp:
        assert tmp.parent == tmp_path and tmp.suffix == ".png" and tmp != target
        tmp.write_bytes(b"\x89PNG")
    assert target.read_bytes() == b"\x89PNG"
    assert _names(tmp_path) == ["map.png"]


@pytest.mark.parametrize("error", [OSError("disk full"), KeyboardInterrupt()])
def test_a_failed_write_keeps_the_old_file_and_no_temporary(tmp_path, error):
    target = tmp_path / "report.html"
    target.write_text("the old report", encoding="utf-8")
    with pytest.raises(type(error)):
        with atomic_write(target) as fh:
            fh.write("half a new rep")
            raise error
    assert target.read_text(encoding="utf-8") == "the old report"
    assert _names(tmp_path) == ["report.html"]


def test_a_failed_first_write_leaves_no_file(tmp_path):
    with pytest.raises(RuntimeError):
        with atomic_write(tmp_path / "new.json", None) as tmp:
            tmp.write_text("{", encoding="utf-8")
            raise RuntimeError("writer failed")
    assert _names(tmp_path) == []


def test_bad_mode_is_refused(tmp_path):
    with pytest.raises(ValueError, match="mode"):
        with atomic_write(tmp_path / "x", "a"):
            pass


def test_stale_temporaries_of_dead_writers_are_removed_live_ones_kept(tmp_path):
    target = tmp_path / "run.h5"
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    dead_pid = int(dead.stdout)  # that process has ended
    stale = tmp_path / f".partial-{dead_pid}-run.h5"
    mine = partial_name(target)
    other = tmp_path / f".partial-{dead_pid}-other.h5"  # another target's: not ours to remove
    for p in (stale, mine, other):
        p.write_bytes(b"")
    remove_stale_partials(target)
    assert not stale.exists() and not mine.exists() and other.exists()
    live = tmp_path / f".partial-{os.getppid()}-run.h5"  # the parent process still runs
    live.write_bytes(b"")
    remove_stale_partials(target)
    assert live.exists()


def test_missing_folder_is_named(tmp_path):
    with pytest.raises(FileNotFoundError, match="does not exist; create it"):
        check_folder(tmp_path / "nope" / "run.h5", "create results file")
    (tmp_path / "afile").write_text("x")
    with pytest.raises(NotADirectoryError, match="is not a folder"):
        check_folder(tmp_path / "afile" / "run.h5", "create results file")


@pytest.mark.skipif(os.name != "posix", reason="flock is POSIX")
def test_a_second_lock_on_the_same_file_is_refused(tmp_path):
    p = tmp_path / "run.h5"
    p.write_bytes(b"")
    fd = lock_file(p, "results file")
    try:
        code = ("import sys; from dic.files import lock_file; "
                "from dic.errors import FileProblem\n"
                "try:\n    lock_file(sys.argv[1], 'results file')\n"
                "except FileProblem as e:\n    print(e); sys.exit(3)\n")
        r = subprocess.run([sys.executable, "-c", code, str(p)], capture_output=True,
                           text=True, cwd=os.getcwd())
        assert r.returncode == 3 and "another process has it open" in r.stdout
    finally:
        unlock_file(fd)
    with pytest.raises(FileNotFoundError, match="no such file"):
        lock_file(tmp_path / "missing.h5", "results file")
    assert issubclass(FileProblem, OSError)
