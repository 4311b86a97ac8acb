"""Memory estimates: the process's own limits (cgroup files, RLIMIT_AS) and the message."""

from __future__ import annotations

import functools
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

import gridflex.memory
from gridflex.errors import InputError
from gridflex.memory import available_memory, cgroup_memory_room, check_memory, memory_bounds
from tests.helpers import REPO_ROOT

GIB = 2**30


def _write(folder: Path, files: dict[str, str]) -> None:
    for name, text in files.items():
        path = folder / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text)


def test_cgroup_v2_room_is_the_smallest_limit_minus_usage_up_the_hierarchy(tmp_path):
    # the group allows 1 GiB and uses 256 MiB; its parent allows 500 MB and uses 100 MB
    _write(
        tmp_path,
        {
            "proc_cgroup": "0::/a/b\n",
            "fs/a/b/memory.max": f"{GIB}\n",
            "fs/a/b/memory.current": f"{256 * 2**20}\n",
            "fs/a/memory.max": "500000000\n",
            "fs/a/memory.current": "100000000\n",
            "fs/memory.max": "max\n",  # no limit at the root
        },
    )
    room = cgroup_memory_room(tmp_path / "proc_cgroup", tmp_path / "fs")
    assert room == 400_000_000
    (tmp_path / "fs/a/memory.max").write_text("max\n")
    room = cgroup_memory_room(tmp_path / "proc_cgroup", tmp_path / "fs")
    assert room == GIB - 256 * 2**20


def test_cgroup_v1_memory_controller_and_its_unlimited_value(tmp_path):
    _write(
        tmp_path,
        {
            "proc_cgroup": "9:pids:/\n4:memory,foo:/job\n0::/\n",
            "fs/memory/job/memory.limit_in_bytes": f"{2 * GIB}\n",
            "fs/memory/job/memory.usage_in_bytes": f"{GIB // 2}\n",
            "fs/memory/memory.limit_in_bytes": "9223372036854771712\n",  # v1's "no limit"
        },
    )
    assert cgroup_memory_room(tmp_path / "proc_cgroup", tmp_path / "fs") == 2 * GIB - GIB // 2
    (tmp_path / "fs/memory/job/memory.limit_in_bytes").write_text("9223372036854771712\n")
    assert cgroup_memory_room(tmp_path / "proc_cgroup", tmp_path / "fs") is None


def test_cgroup_folder_not_visible_uses_the_mounted_root(tmp_path):
    # in another cgroup namespace /proc/self/cgroup names a path the mount does not show
    _write(
        tmp_path,
        {
            "proc_cgroup": "0::/not/here\n",
            "fs/memory.max": f"{3 * GIB}\n",
            "fs/memory.current": f"{GIB}\n",
        },
    )
    assert cgroup_memory_room(tmp_path / "proc_cgroup", tmp_path / "fs") == 2 * GIB
    assert cgroup_memory_room(tmp_path / "missing", tmp_path / "fs") is None


def test_check_memory_names_the_cgroup_limit_and_the_advice(tmp_path, monkeypatch):
    _write(
        tmp_path,
        {
            "proc_cgroup": "0::/job\n",
            "fs/job/memory.max": f"{64 * 2**20}\n",
            "fs/job/memory.current": f"{32 * 2**20}\n",
        },
    )
    fake = functools.partial(cgroup_memory_room, tmp_path / "proc_cgroup", tmp_path / "fs")
    monkeypatch.setattr(gridflex.memory, "cgroup_memory_room", fake)
    assert ("the control group's memory limit", 32 * 2**20) in memory_bounds()
    assert available_memory() == 32 * 2**20
    check_memory(16 * 2**20, "a small step")  # fits in 90 % of 32 MiB
    with pytest.raises(InputError) as caught:
        check_memory(40 * 2**20, "a big step", advice="use a coarser [working_grid] spacing")
    message = str(caught.value)
    assert message.startswith("a big step needs about 0.0391 GiB but only 0.0312 GiB")
    assert "control group's memory limit" in message
    assert message.endswith("use a coarser [working_grid] spacing")


def test_check_memory_refuses_estimates_beyond_any_float():
    # grid sizes multiplied in Python integers can exceed the float range
    with pytest.raises(InputError, match="needs more memory than exists.*fewer cells"):
        check_memory(8 * 10**400, "an absurd grid", advice="use fewer cells")
    with pytest.raises(InputError, match="needs more memory than exists"):
        check_memory(float("inf"), "an infinite grid")


def test_rlimit_as_limits_the_available_memory():
    # a child process limits its own address space to 1 GiB above what it already uses
    script = textwrap.dedent(
        """
        import resource
        from gridflex.errors import InputError
        from gridflex.memory import _status_bytes, available_memory, check_memory

        used = _status_bytes("VmSize")
        resource.setrlimit(resource.RLIMIT_AS, (used + 2**30, resource.RLIM_INFINITY))
        room = available_memory()
        assert 0.5 * 2**30 < room <= 2**30, room
        check_memory(0.25 * 2**30, "a quarter GiB")
        try:
            check_memory(1.5 * 2**30, "one and a half GiB", advice="use fewer cells")
        except InputError as exc:
            print(exc)
        """
    )
    done = subprocess.run(
        [sys.executable, "-c", script],
        cwd=REPO_ROOT,
        capture_output=True,
        text=True,
        timeout=120,
        env={"PYTHONPATH": str(REPO_ROOT), "PATH": "/usr/bin:/bin"},
    )
    assert done.returncode == 0, done.stderr
    line = done.stdout.strip()
    assert line.startswith("one and a half GiB needs about 1.5 GiB but only")
    assert "RLIMIT_AS" in line and line.endswith("use fewer cells")
