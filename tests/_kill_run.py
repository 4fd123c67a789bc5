"""Kill a Monte Carlo run script with SIGKILL halfway through its measurements (checkpoint tests)."""

import os
import signal
import subprocess
import sys
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def kill_mid_run(script, ck, sweeps: int, timeout: float = 300.0) -> dict:
    """Start ``python script ck sweeps``; SIGKILL it once its checkpoint in ``ck`` holds between 1
    and sweeps/2 measured sweeps. Returns the environment to rerun the script with."""
    env = dict(os.environ, PYTHONPATH=ROOT)
    proc = subprocess.Popen([sys.executable, str(script), str(ck), str(sweeps)], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    t0 = time.time()
    killed = False
    while time.time() - t0 < timeout:
        files = list(ck.glob("*.npz")) if ck.exists() else []
        if files:
            try:
                with np.load(files[0]) as z:
                    done = int(z["meas_done"])
            except Exception:  # being replaced right now
                done = 0
            if 0 < done < sweeps // 2:
                proc.send_signal(signal.SIGKILL)
                proc.wait()
                killed = True
                break
        if proc.poll() is not None:
            break
        time.sleep(0.02)
    assert killed, "the run finished before it could be killed; make it longer"
    return env
