"""dic.files: atomic writes leave the old file or the new one, never half a file or a temporary.

The guarantee rests on os.replace being atomic within one file system (POSIX rename(2);
common practice, no source). JSON files are checked with the standard library's parser in
strict mode: RFC 8259 has no NaN or Infinity, which ``json.loads`` otherwise accepts.
"""

from __future__ import annotations

import errno
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import dic.cli
from dic.errors import DiskFull, FileProblem, NotWritable
from dic.files import (atomic_write, check_folder, json_safe, json_text, lock_file,
                       partial_name, remove_stale_partials, unlock_file, write_error,
                       write_json, write_text, writing)

SAMPLE = Path(__file__).resolve().parent.parent / "sample_images" / "coupon_000.png"


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


# --------------------------------------------------------------------------------------------
# strict JSON and the one-line error of a failed write
# --------------------------------------------------------------------------------------------
def _refuse(constant):
    raise ValueError(f"not strict JSON: {constant}")


def strict_loads(text):
    """``json.loads`` that refuses NaN, Infinity and -Infinity (RFC 8259 has none of them)."""
    return json.loads(text, parse_constant=_refuse)


def test_the_strict_parser_refuses_what_plain_json_dumps_writes():
    # the oracle can fail: Python's default output for NaN is not strict JSON (RFC 8259)
    with pytest.raises(ValueError, match="not strict JSON: NaN"):
        strict_loads(json.dumps({"x": float("nan")}))
    with pytest.raises(ValueError, match="not strict JSON: -Infinity"):
        strict_loads(json.dumps([-float("inf")]))


def test_nan_and_infinity_are_written_as_null_and_numpy_values_as_plain_ones(tmp_path):
    value = {"nan": float("nan"), "inf": np.inf, "ninf": -np.inf, "f32": np.float32(0.5),
             "f64": np.float64(1.25), "i64": np.int64(7), "flag": np.bool_(True),
             "grid": np.array([[1.0, np.nan], [3.0, 4.0]]), "pair": (np.uint8(2), None),
             np.int32(3): "key made a string", "where": tmp_path}
    p = write_json(tmp_path / "values.json", value)
    assert p == tmp_path / "values.json"
    text = p.read_text(encoding="utf-8")
    assert text == json_text(value) and text.endswith("}\n")
    got = strict_loads(text)
    assert got == {"nan": None, "inf": None, "ninf": None, "f32": 0.5, "f64": 1.25, "i64": 7,
                   "flag": True, "grid": [[1.0, None], [3.0, 4.0]], "pair": [2, None],
                   "3": "key made a string", "where": str(tmp_path)}
    assert type(got["i64"]) is int and type(got["flag"]) is bool and type(got["f32"]) is float
    assert _names(tmp_path) == ["values.json"]
    # the compact form is one line, with the same content
    one = json_text(value, indent=None)
    assert one.count("\n") == 1 and strict_loads(one) == got
    # a NumPy scalar NaN too, and json_safe leaves plain values as they are
    assert json_safe([np.float64("nan"), np.float32("inf"), "a", 1, 2.5, False]) == \
        [None, None, "a", 1, 2.5, False]


def test_write_text_replaces_the_old_file(tmp_path):
    target = tmp_path / "table.csv"
    target.write_text("old\n", encoding="utf-8")
    assert write_text(target, "x,y\n1,2\n") == target
    assert target.read_bytes() == b"x,y\n1,2\n"
    assert _names(tmp_path) == ["table.csv"]


def _one_line_naming(exc, path, *fix):
    msg = str(exc)
    assert "\n" not in msg and str(path) in msg and ".partial" not in msg, msg
    for words in fix:
        assert words in msg, msg


def test_a_missing_folder_gives_the_one_line_error(tmp_path):
    target = tmp_path / "nope" / "floor.json"
    with pytest.raises(FileNotFoundError) as e:
        write_json(target, {"x": 1.0}, label="--json")
    assert str(e.value).startswith(f"--json: cannot write '{target}'")
    _one_line_naming(e.value, target, f"folder '{target.parent}' does not exist", "create it")
    assert _names(tmp_path) == []


def test_a_failure_inside_the_block_keeps_the_old_file(tmp_path):
    # a folder where the file should be: os.replace cannot put a file over it (POSIX
    # rename(2), EISDIR; common practice, no source)
    target = tmp_path / "report.html"
    target.mkdir()
    with pytest.raises(FileProblem) as e:
        write_text(target, "<html></html>\n", label="out_dir")
    assert isinstance(e.value, OSError) and str(e.value).startswith("out_dir: cannot write")
    _one_line_naming(e.value, target, "check the folder permissions and free space")
    assert target.is_dir() and _names(tmp_path) == ["report.html"]
    # an error of the writer in path mode is caught the same way, and the temporary removed
    with pytest.raises(FileProblem) as e:
        with writing(tmp_path / "map.png", None) as tmp:
            tmp.write_bytes(b"\x89PNG")
            raise OSError(errno.EIO, os.strerror(errno.EIO))
    _one_line_naming(e.value, tmp_path / "map.png", os.strerror(errno.EIO))
    assert _names(tmp_path) == ["report.html"]


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="Linux sysfs")
def test_a_location_nobody_can_write_gives_the_one_line_error():
    # sysfs refuses new files, even to root (Linux sysfs; common practice, no source)
    target = Path("/sys/kernel/dic_noise_floor.json")
    if not target.parent.is_dir():
        pytest.skip("no /sys/kernel")
    with pytest.raises(NotWritable) as e:
        write_json(target, {"x": float("nan")})
    assert str(e.value).startswith("path: cannot write")
    _one_line_naming(e.value, target, "choose a folder you can write to")


def test_a_full_disk_is_told_apart():
    # the errors the system gives for a full disk or quota (errno ENOSPC, EDQUOT; POSIX)
    p = Path("out") / "noise_floor.json"
    for code in (errno.ENOSPC, errno.EDQUOT):
        err = write_error(p, OSError(code, os.strerror(code)), label="out_dir")
        assert isinstance(err, DiskFull)
        _one_line_naming(err, p, "out_dir: cannot write", "free disk space")
    err = write_error(p, PermissionError(errno.EACCES, os.strerror(errno.EACCES)), None)
    assert isinstance(err, NotWritable) and str(err).startswith("cannot write")


def test_the_command_line_prints_a_failed_json_write_as_one_line(tmp_path, capsys):
    target = tmp_path / "missing" / "q.json"
    code = dic.cli.main(["pattern", str(SAMPLE), "--roi", "0,46,639,193", "--json",
                         str(target)])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and err.startswith(f"dic: error: --json: cannot write '{target}'")
    assert "does not exist" in err and "Traceback" not in err
