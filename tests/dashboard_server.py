"""Start and stop the dashboard on a free loopback port: shared by tests/test_browser.py and
benchmarks/bench_load.py."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def free_port():
    """A TCP port free on the loopback address now."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start_server(port, log_path, data_dir, timeout_s=60.0):
    """``streamlit run dashboard.py`` from this Python on 127.0.0.1:``port``, its output in ``log_path``,
    its run store in ``data_dir``; returns the process once the server answers its health check, or
    raises RuntimeError (the server stopped) after ``timeout_s``."""
    cmd = [sys.executable, "-m", "streamlit", "run", "dashboard.py", "--server.headless", "true",
           "--server.address", "127.0.0.1", "--server.port", str(port), "--browser.gatherUsageStats", "false",
           "--server.fileWatcherType", "none", "--server.runOnSave", "false"]
    # The shared password off, whatever the secrets file says; saved runs in a store of this run's own.
    env = {**os.environ, "FILMCALC_PASSWORD": "", "FILMCALC_DATA": str(data_dir)}
    env.pop("FILMCALC_DATABASE_URL", None)
    with open(log_path, "wb") as log:
        proc = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT,
                                stdin=subprocess.DEVNULL, start_new_session=True, preexec_fn=_die_with_parent)
    deadline = time.monotonic() + timeout_s
    while True:
        if proc.poll() is not None:
            raise RuntimeError(f"streamlit exited with status {proc.returncode}; see {log_path}")
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/_stcore/health", timeout=2) as r:
                if r.status == 200:
                    return proc
        except (urllib.error.URLError, ConnectionError, TimeoutError):
            pass
        if time.monotonic() > deadline:
            stop_server(proc)
            raise RuntimeError(f"streamlit did not answer within {timeout_s:.0f} s; see {log_path}")
        time.sleep(0.25)


def _die_with_parent():
    """In the child before exec (Linux): SIGTERM when the process that started it dies without stopping it."""
    try:
        import ctypes
        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGTERM)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # not Linux: the finally clauses stop the server
        pass


def stop_server(proc, grace_s=10.0):
    """Terminate the server's process group (it was started with start_new_session=True)."""
    if proc is None:
        return
    try:
        os.killpg(proc.pid, signal.SIGTERM)
    except ProcessLookupError:  # the whole group has gone already
        proc.wait()
        return
    try:
        proc.wait(timeout=grace_s)
    except subprocess.TimeoutExpired:
        pass
    try:
        os.killpg(proc.pid, signal.SIGKILL)  # whatever is left of the group
    except ProcessLookupError:
        pass
    proc.wait(timeout=grace_s)
