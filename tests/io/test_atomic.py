"""Output files: one at a time (atomic_path) and as a set committed together (OutputSet).

Real files in temporary folders; failures are made real (a name taken meanwhile, a
folder where a file goes, a process killed with SIGKILL).
"""

from __future__ import annotations

import logging
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from gridflex.errors import InputError, OutputError
from gridflex.io.atomic import OutputSet, atomic_path, remove_stale_temporaries


def _tree(folder: Path) -> list[str]:
    """Every file and folder under *folder*, hidden ones included, relative."""
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def _dead_pid() -> int:
    """The id of a process that has ended (a child, waited for)."""
    child = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        text=True,
        capture_output=True,
        check=True,
    )
    return int(child.stdout)


def _write(path: Path, text: str) -> None:
    with atomic_path(path) as tmp:
        tmp.write_text(text)


def test_a_set_is_committed_only_when_every_file_was_written(tmp_path):
    files = OutputSet()
    files.add({"a": tmp_path / "new" / "a.txt", "b": tmp_path / "new" / "deeper" / "b.txt"})
    assert _tree(tmp_path) == []  # checking creates nothing
    with pytest.raises(ValueError, match="boom"), files.writing():
        _write(tmp_path / "new" / "a.txt", "a")
        assert not (tmp_path / "new" / "a.txt").exists()  # staged, not yet in place
        raise ValueError("boom")
    assert _tree(tmp_path) == []  # no file, no temporary, no folder left
    with files.writing():
        _write(tmp_path / "new" / "a.txt", "a")
        _write(tmp_path / "new" / "deeper" / "b.txt", "b")
    assert _tree(tmp_path) == ["new", "new/a.txt", "new/deeper", "new/deeper/b.txt"]
    assert (tmp_path / "new" / "deeper" / "b.txt").read_text() == "b"
    assert oct((tmp_path / "new" / "a.txt").stat().st_mode & 0o777) != oct(0o600)


def test_a_failing_writer_leaves_nothing_and_says_which_file(tmp_path):
    files = OutputSet()
    files.add({"a": tmp_path / "a.txt", "b": tmp_path / "out" / "b.txt"})
    with pytest.raises(OutputError, match=r"b\.txt: cannot write \(disk full\); nothing"):
        with files.writing():
            _write(tmp_path / "a.txt", "a")
            with atomic_path(tmp_path / "out" / "b.txt") as tmp:
                tmp.write_text("half")
                raise OSError(28, "disk full")
    assert _tree(tmp_path) == []


def test_an_unplanned_path_inside_a_set_is_a_bug(tmp_path):
    files = OutputSet()
    files.add({"a": tmp_path / "a.txt"})
    with pytest.raises(RuntimeError, match="not in the output plan"), files.writing():
        _write(tmp_path / "other.txt", "x")
    assert _tree(tmp_path) == []


def test_checks_name_the_output_and_refuse_before_anything_is_made(tmp_path):
    (tmp_path / "taken.txt").write_text("old")
    (tmp_path / "folder").mkdir()
    (tmp_path / "input.txt").write_text("in")
    files = OutputSet(inputs=[tmp_path / "input.txt"])
    cases = {
        "exists": (tmp_path / "taken.txt", "output exists"),
        "folder": (tmp_path / "folder", "is a directory"),
        "slash": (f"{tmp_path / 'new'}{os.sep}", "names a folder"),
        "input": (tmp_path / "input.txt", "overwrite an input"),
        "under a file": (tmp_path / "taken.txt" / "x.txt", "is a file, not a folder"),
    }
    for name, (path, message) in cases.items():
        with pytest.raises(InputError, match=f"^{name}: .*{message}"):
            files.add({"fine": tmp_path / "new" / "fine.txt", name: path})
    with pytest.raises(InputError, match="^b: .* also the path of output 'a'"):
        files.add({"a": tmp_path / "x.txt", "b": tmp_path / "." / "x.txt"})
    assert files.paths == {}  # all or nothing
    assert _tree(tmp_path) == ["folder", "input.txt", "taken.txt"]


def test_without_overwrite_a_file_written_meanwhile_is_kept_and_this_run_undone(tmp_path):
    files = OutputSet()
    files.add({"a": tmp_path / "a.txt", "b": tmp_path / "b.txt"})
    with pytest.raises(OutputError, match=r"b\.txt: output exists \(another run"):
        with files.writing():
            _write(tmp_path / "a.txt", "mine")
            _write(tmp_path / "b.txt", "mine")
            (tmp_path / "b.txt").write_text("the other run's")  # appears before the commit
    # a.txt (committed first) was taken back; b.txt is the other run's
    assert _tree(tmp_path) == ["b.txt"]
    assert (tmp_path / "b.txt").read_text() == "the other run's"


def test_with_overwrite_a_failed_commit_puts_the_replaced_files_back(tmp_path):
    for name in ("a.txt", "b.txt"):
        (tmp_path / name).write_text(f"old {name}")
    names = ("a.txt", "a_new.txt", "b.txt", "c.txt")  # committed in this order
    files = OutputSet(overwrite=True)
    files.add({name: tmp_path / name for name in names})
    with pytest.raises(OutputError, match=r"c\.txt: cannot write .*nothing of this run"):
        with files.writing():
            for name in names:
                _write(tmp_path / name, f"new {name}")
            (tmp_path / "c.txt").mkdir()  # the rename of the last one fails
            (tmp_path / "c.txt" / "keep").write_text("x")
    assert (tmp_path / "a.txt").read_text() == "old a.txt"
    assert (tmp_path / "b.txt").read_text() == "old b.txt"
    assert _tree(tmp_path) == ["a.txt", "b.txt", "c.txt", "c.txt/keep"]  # a_new.txt removed


def test_single_file_is_not_put_over_a_file_that_appeared_meanwhile(tmp_path):
    target = tmp_path / "a.txt"
    with pytest.raises(OutputError, match="output exists"), atomic_path(target) as tmp:
        tmp.write_text("mine")
        target.write_text("theirs")
    assert target.read_text() == "theirs"
    assert _tree(tmp_path) == ["a.txt"]
    with atomic_path(target, overwrite=True) as tmp:
        tmp.write_text("mine")
    assert target.read_text() == "mine"


def test_stale_temporaries_of_ended_processes_are_removed(tmp_path, caplog):
    dead = _dead_pid()
    stale = tmp_path / f".a.nc.gridflex-{dead}-abc123.part"
    stale_copy = tmp_path / f".a.nc.gridflex-{dead}-0f0f.old"
    live = tmp_path / f".a.nc.gridflex-{os.getpid()}-abc123.part"
    other_output = tmp_path / f".b.nc.gridflex-{dead}-abc123.part"
    foreign = tmp_path / ".a.nc.abc123.part"  # not named by gridflex
    for path in (stale, stale_copy, live, other_output, foreign):
        path.write_text("x")
    with caplog.at_level(logging.INFO, logger="gridflex.io.atomic"):
        OutputSet().add({"a": tmp_path / "a.nc"})
    assert not stale.exists() and not stale_copy.exists()
    assert live.exists() and other_output.exists() and foreign.exists()
    assert f"left by an interrupted gridflex run (process {dead})" in caplog.text
    assert remove_stale_temporaries(tmp_path) == [other_output]  # any output name


KILLED_WRITER = """
import sys, time
from pathlib import Path
from gridflex.io.atomic import OutputSet, atomic_path

folder = Path(sys.argv[1])
files = OutputSet()
files.add({"small": folder / "small.txt", "big": folder / "big.bin"})
with files.writing():
    with atomic_path(folder / "small.txt") as tmp:
        tmp.write_text("done")
    with atomic_path(folder / "big.bin") as tmp:
        with open(tmp, "wb") as handle:
            block = bytes(1 << 20)
            for i in range(100):
                handle.write(block)
                handle.flush()
                if i == 10:
                    print("writing", flush=True)
                time.sleep(0.05)
"""


def test_kill_9_during_a_large_write_leaves_nothing_under_a_final_name(tmp_path):
    out = tmp_path / "out"
    child = subprocess.Popen(
        [sys.executable, "-c", textwrap.dedent(KILLED_WRITER), str(out)],
        stdout=subprocess.PIPE,
        text=True,
    )
    assert child.stdout is not None
    assert child.stdout.readline().strip() == "writing"
    os.kill(child.pid, signal.SIGKILL)
    child.wait(timeout=30)
    left = [p.name for p in out.iterdir()]
    assert sorted(n.split(".gridflex-")[0] for n in left) == [".big.bin", ".small.txt"]
    assert all(f".gridflex-{child.pid}-" in n and n.endswith(".part") for n in left)
    assert sum(p.stat().st_size for p in out.iterdir()) >= 10 << 20
    # the next run writing the same outputs removes them
    files = OutputSet()
    files.add({"small": out / "small.txt", "big": out / "big.bin"})
    assert list(out.iterdir()) == []
    with files.writing():
        _write(out / "small.txt", "again")
        _write(out / "big.bin", "again")
    assert _tree(out) == ["big.bin", "small.txt"]


KILLED_BETWEEN_RENAMES = """
import os, signal, sys
from pathlib import Path
from gridflex.io.atomic import OutputSet, atomic_path

folder, other = Path(sys.argv[1]), Path(sys.argv[2])
names = {"a": folder / "a.txt", "b": folder / "b.txt", "c": other / "c.txt"}
files = OutputSet(overwrite=True)
files.add(names)
renames = []
real_replace = os.replace


def replace_then_die(source, target):  # the fault: SIGKILL after the first rename
    real_replace(source, target)
    renames.append(target)
    if len(renames) == 1:
        os.kill(os.getpid(), signal.SIGKILL)


with files.writing():
    for path in names.values():
        with atomic_path(path) as tmp:
            tmp.write_text("new")
    os.replace = replace_then_die
"""


def test_kill_9_between_the_renames_of_a_set_is_finished_by_the_next_run(tmp_path, caplog):
    folder, other = tmp_path / "out", tmp_path / "other"
    folder.mkdir()
    other.mkdir()
    for path in (folder / "a.txt", folder / "b.txt", other / "c.txt"):
        path.write_text("old")
    child = subprocess.run(
        [sys.executable, "-c", textwrap.dedent(KILLED_BETWEEN_RENAMES), str(folder), str(other)],
        capture_output=True,
        text=True,
    )
    assert child.returncode == -signal.SIGKILL, child.stderr
    finals = [folder / "a.txt", folder / "b.txt", other / "c.txt"]
    contents = [p.read_text() for p in finals]
    assert sorted(contents) == ["new", "old", "old"]  # the kill fell between two renames
    assert any(n.endswith(".commit") for n in os.listdir(folder))
    # the next run into the other folder finishes the commit: all three files are new
    with caplog.at_level(logging.WARNING, logger="gridflex.io.atomic"):
        OutputSet(overwrite=True).add({"d": other / "d.txt"})
    assert [p.read_text() for p in finals] == ["new", "new", "new"]
    assert "interrupted in an earlier run" in caplog.text
    # journals, roll-back copies and temporaries of the dead run: all gone after a run there
    OutputSet(overwrite=True).add({"a": folder / "a.txt"})
    assert _tree(folder) == ["a.txt", "b.txt"]
    assert _tree(other) == ["c.txt"]
