"""One writer per output folder (phasemap.store.output_lock): a second run is refused while the
first is live, naming it; a stale lock of a dead process is taken over with a note.

Source: common practice, no source (these are software-behaviour checks, no physics values).
"""

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
from _toml_configs import CURVE5

from phasemap.model import ConfigError
from phasemap.store import LOCK_NAME, output_lock

ROOT = Path(__file__).resolve().parents[1]

CFG = CURVE5

HOLDER = """
import sys, time
from pathlib import Path
from phasemap.store import output_lock
with output_lock(sys.argv[1], "phasemap run first.toml --out shared"):
    Path(sys.argv[2]).write_text("locked")
    time.sleep(120)
"""


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _wait_for(path: Path, proc, seconds=60):
    t0 = time.monotonic()
    while not path.exists():
        assert proc.poll() is None, proc.stderr.read()
        assert time.monotonic() - t0 < seconds, "lock holder did not start"
        time.sleep(0.05)


def test_second_process_refused_while_first_is_live_then_stale_lock_taken_over(tmp_path):
    out = tmp_path / "shared"
    ready = tmp_path / "ready"
    first = subprocess.Popen([sys.executable, "-c", HOLDER, str(out), str(ready)], env=_env(),
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for(ready, first)
        cfg = tmp_path / "second.toml"
        cfg.write_text(CFG.replace("t = 0.1", "t = 0.05"))  # another model, and --restart
        r = subprocess.run([sys.executable, "-m", "phasemap", "run", str(cfg), "--out", str(out), "--restart",
                            "--quiet"], env=_env(), capture_output=True, text=True, timeout=300)
        assert r.returncode == 2, r.stderr
        assert r.stderr.count("\n") == 1 and "Traceback" not in r.stderr, r.stderr
        for word in (f"pid {first.pid}", socket.gethostname(), "started", "phasemap run first.toml", "live run"):
            assert word in r.stderr, (word, r.stderr)
        assert sorted(p.name for p in out.iterdir()) == [LOCK_NAME]  # the second run wrote nothing
        # the first run dies without releasing its lock: the next run takes the stale lock over
        first.send_signal(signal.SIGKILL)
        first.wait(30)
        assert (out / LOCK_NAME).is_file()
        r = subprocess.run([sys.executable, "-m", "phasemap", "run", str(cfg), "--out", str(out), "--quiet"],
                           env=_env(), capture_output=True, text=True, timeout=300)
        assert r.returncode == 0, r.stderr
        assert "stale lock" in r.stderr and f"pid {first.pid}" in r.stderr
        assert (out / "second.nc").is_file() and not (out / LOCK_NAME).exists()
    finally:
        if first.poll() is None:
            first.kill()
        first.wait(30)


def test_lock_refuses_in_process_and_releases(tmp_path):
    with output_lock(tmp_path / "o", "job A") as info:
        assert info["pid"] == os.getpid()
        rec = json.loads((tmp_path / "o" / LOCK_NAME).read_text())
        assert rec["command"] == "job A" and rec["host"] == socket.gethostname()
        with output_lock(tmp_path / "o", "same job, nested"):  # re-entrant in one process
            pass
        assert (tmp_path / "o" / LOCK_NAME).is_file()
    assert not (tmp_path / "o" / LOCK_NAME).exists()
    with pytest.raises(RuntimeError):  # released on failure too
        with output_lock(tmp_path / "o", "job B"):
            raise RuntimeError("boom")
    assert not (tmp_path / "o" / LOCK_NAME).exists()


def _fake_lock(folder: Path, **kw):
    folder.mkdir(parents=True, exist_ok=True)
    rec = {"pid": os.getpid(), "pid_start": None, "host": socket.gethostname(), "started": "2026-01-01T00:00:00+00:00",
           "command": "phasemap run other.toml"}
    rec.update(kw)
    (folder / LOCK_NAME).write_text(json.dumps(rec))


def test_live_lock_of_this_host_is_refused_with_its_record(tmp_path):
    _fake_lock(tmp_path, pid=os.getppid())  # the parent process is alive
    with pytest.raises(ConfigError, match=f"pid {os.getppid()} on host .*started 2026-01-01.*phasemap run other.toml"):
        with output_lock(tmp_path, "x"):
            pass
    assert (tmp_path / LOCK_NAME).is_file()  # somebody else's lock is left alone


def test_lock_of_other_host_is_refused(tmp_path):
    _fake_lock(tmp_path, host="elsewhere.invalid")
    with pytest.raises(ConfigError, match="another host"):
        with output_lock(tmp_path, "x"):
            pass


@pytest.mark.parametrize("kw", [{"pid": 2**22 + 12345}, {"pid_start": -1}], ids=["dead-pid", "reused-pid"])
def test_stale_lock_taken_over_with_note(tmp_path, kw):
    _fake_lock(tmp_path, **kw)
    notes = []
    with output_lock(tmp_path, "x", note=notes.append):
        rec = json.loads((tmp_path / LOCK_NAME).read_text())
        assert rec["command"] == "x"
    assert len(notes) == 1 and "stale lock" in notes[0]
    assert not (tmp_path / LOCK_NAME).exists()


def test_refused_lock_leaves_no_new_folder(tmp_path):
    with output_lock(tmp_path / "a" / "b", "x"):
        pass
    assert (tmp_path / "a" / "b").is_dir()  # the job succeeded: the folder is its output
    with pytest.raises(ValueError):
        with output_lock(tmp_path / "c", "x"):
            raise ValueError("bad input found late")
    assert not (tmp_path / "c").exists()
