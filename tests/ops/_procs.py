"""Helpers for the ops tests that run real processes: start them bounded, always stop them."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import time
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def free_port() -> int:
    """Return a TCP port on 127.0.0.1 that was free a moment ago."""
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def start(argv: Sequence[str], env: Mapping[str, str], log: Path) -> subprocess.Popen:
    """Start ``argv`` in its own process group, output to ``log``."""
    with open(log, "ab") as out:
        return subprocess.Popen(
            list(argv),
            cwd=REPO,
            env=dict(env),
            stdout=out,
            stderr=subprocess.STDOUT,
            stdin=subprocess.DEVNULL,
            start_new_session=True,
        )


def stop_group(proc: subprocess.Popen, grace: float = 20.0) -> int | None:
    """SIGTERM the process group, wait up to ``grace`` s, then SIGKILL what is left; return rc."""
    if proc.poll() is None:
        try:
            os.killpg(proc.pid, signal.SIGTERM)
            proc.wait(grace)
        except (ProcessLookupError, subprocess.TimeoutExpired):
            pass
    rc = proc.poll()
    try:
        os.killpg(proc.pid, signal.SIGKILL)  # children that outlived their parent
    except ProcessLookupError:
        pass
    if proc.poll() is None:
        proc.wait(10)
    return rc


def wait_for(check: Callable[[], object], timeout: float, what: str, step: float = 0.3):
    """Poll ``check`` until it returns something truthy; AssertionError after ``timeout`` s."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = check()
        if value:
            return value
        time.sleep(step)
    raise AssertionError(f"timed out after {timeout:.0f} s waiting for {what}")


def tail(path: Path, lines: int = 40) -> str:
    """The last lines of a log file, for failure messages."""
    if not path.exists():
        return ""
    return "\n".join(path.read_text(errors="replace").splitlines()[-lines:])


def stop_all(procs: Sequence[subprocess.Popen], grace: float = 20.0) -> None:
    """SIGTERM each main process at once (a warm shutdown), wait, then SIGKILL every group."""
    for proc in procs:
        if proc.poll() is None:
            try:
                proc.send_signal(signal.SIGTERM)
            except ProcessLookupError:
                pass
    deadline = time.monotonic() + grace
    for proc in procs:
        try:
            proc.wait(max(deadline - time.monotonic(), 0.1))
        except subprocess.TimeoutExpired:
            pass
    for proc in procs:
        stop_group(proc, grace=0.1)


def readme_example_request() -> dict:
    """Return the JSON body marked as the README's example request."""
    import json
    import re

    text = (REPO / "README.md").read_text()
    match = re.search(r"<!-- example-request -->\n```json\n(.*?)\n```", text, re.S)
    assert match, "README has no marked example request"
    return json.loads(match.group(1))
