"""Saving under faults: a kill part-way, a file-size limit (standing in for a full disk), links,
read-only files, special files and the temporary files a killed save leaves behind.

What must hold each time: the file under the user's name is either the old one or the new one,
whole; a refusal is one line naming the file and what to do; nothing else is replaced.
"""

from __future__ import annotations

import os
import resource
import signal
import subprocess
import sys
import time

import pytest

from regbench.errors import ProjectError
from regbench.project import load_project, save_project
from regbench.project.atomic import atomic_write_bytes, remove_stale_temporaries

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
SAMPLE = os.path.join(ROOT, "sample_projects", "greenhouse.regbench")


@pytest.fixture(scope="module")
def sample():
    return load_project(SAMPLE, compute=False)


def test_symlink_target_is_updated_and_the_link_kept(tmp_path, sample):
    real = tmp_path / "store" / "real.regbench"
    real.parent.mkdir()
    real.write_bytes(b"old")
    link = tmp_path / "link.regbench"
    link.symlink_to(real)
    save_project(sample, link)
    assert link.is_symlink() and os.readlink(link) == str(real)
    assert load_project(link, compute=False).cache_status == "used"
    assert real.read_bytes()[:2] == b"PK"


def test_read_only_file_is_refused_and_kept(tmp_path, sample):
    p = tmp_path / "ro.regbench"
    p.write_bytes(b"keep me")
    os.chmod(p, 0o444)
    with pytest.raises(ProjectError, match=r"ro\.regbench: the file is read-only; make it writable or save under "
                                           r"another name"):
        save_project(sample, p)
    assert p.read_bytes() == b"keep me"


@pytest.mark.parametrize("special", ["/dev/null", "/dev/full"])
def test_special_files_are_refused_not_replaced(special, sample):
    if not os.path.exists(special):
        pytest.skip(f"{special} is not on this machine")
    before = os.stat(special)
    with pytest.raises(ProjectError, match="device, pipe or other special file"):
        atomic_write_bytes(special, b"x")
    after = os.stat(special)
    assert (after.st_ino, after.st_rdev) == (before.st_ino, before.st_rdev)


def test_pipe_and_folder_are_refused(tmp_path):
    fifo = tmp_path / "out.json"
    os.mkfifo(fifo)
    with pytest.raises(ProjectError, match="special file"):
        atomic_write_bytes(fifo, b"{}")
    with pytest.raises(ProjectError, match="it is a folder; give a file name"):
        atomic_write_bytes(tmp_path, b"{}")


def test_stale_temporaries_of_dead_processes_are_removed(tmp_path):
    target = tmp_path / "p.regbench"
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    dead_pid = int(dead.stdout)
    stale = tmp_path / f".p.regbench.{dead_pid}.abcd1234.tmp"
    live = tmp_path / f".p.regbench.{os.getpid()}.efgh5678.tmp"
    old_style = tmp_path / ".p.regbench.ijkl9012.tmp"
    young_old_style = tmp_path / ".p.regbench.mnop3456.tmp"
    foreign = tmp_path / ".p.regbench.notes.tmp"     # not a name the writer makes: left alone
    for f in (stale, live, old_style, young_old_style, foreign):
        f.write_bytes(b"partial")
    hour_ago = time.time() - 2 * 3600
    os.utime(old_style, (hour_ago, hour_ago))
    atomic_write_bytes(target, b"new")
    assert target.read_bytes() == b"new"
    left = sorted(p.name for p in tmp_path.iterdir())
    assert left == sorted(["p.regbench", live.name, young_old_style.name, foreign.name])
    assert remove_stale_temporaries(str(target)) == 0


SAVER = r"""
import os, sys, time
sys.path.insert(0, {root!r})
from regbench.project import load_project, save_project
s = load_project({sample!r}, compute=False)
print("ready", flush=True)
for i in range(10_000):
    save_project(s, {path!r})
"""


def test_kill_during_save_leaves_a_whole_file(tmp_path):
    """SIGKILL at random moments while a process saves over and over: the file always loads."""
    path = str(tmp_path / "k.regbench")
    save_project(load_project(SAMPLE, compute=False), path)
    kills = 0
    for delay in (0.05, 0.13, 0.21, 0.34, 0.55, 0.8):
        proc = subprocess.Popen([sys.executable, "-c", SAVER.format(root=ROOT, sample=SAMPLE, path=path)],
                                stdout=subprocess.PIPE, text=True)
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=60)
        kills += 1
        assert load_project(path, compute=False).cache_status == "used"
    # The next save clears the temporaries the killed processes left.
    save_project(load_project(path, compute=False), path)
    assert [n for n in os.listdir(tmp_path) if n.endswith(".tmp")] == []
    print(f"save faults: {kills} kills during save, the project loaded whole after each")


def test_file_size_limit_during_project_save(tmp_path):
    """RLIMIT_FSIZE (a full disk, in effect) part-way through `regbench new`: one line, old file whole."""
    out = tmp_path / "full.regbench"
    out.write_bytes(b"previous")

    def limit():
        resource.setrlimit(resource.RLIMIT_FSIZE, (64 * 1024, 64 * 1024))

    r = subprocess.run([sys.executable, "-m", "regbench", "new", os.path.join(ROOT, "sample_projects", "greenhouse.csv"),
                        "--target", "yield_kg_m2", "--penalties", "10", "--bootstrap", "0", "-o", str(out)],
                       capture_output=True, text=True, preexec_fn=limit, timeout=300,
                       env=dict(os.environ, PYTHONPATH=ROOT))
    assert r.returncode == 2, r.stderr
    assert r.stderr.count("\n") == 1 and "Traceback" not in r.stderr
    assert "full.regbench: File too large; the previous file (if any) is unchanged" in r.stderr
    assert out.read_bytes() == b"previous"
    assert [n for n in os.listdir(tmp_path) if n.endswith(".tmp")] == []
