"""The embedded default launcher behind ``make run``: no external server needed.

SQLite under var/, kombu's filesystem:// broker under var/broker, one real Celery worker process and
the API under gunicorn on 127.0.0.1. ``API_COMMAND`` and ``WORKER_COMMAND`` are the exact commands
docker-compose.yml runs, so the embedded and the production set-ups start the same programs.

``SIZEWISE_VAR_DIR`` moves the whole var/ folder (database and broker) elsewhere, e.g. for a test.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from collections.abc import Mapping, Sequence
from datetime import timedelta
from pathlib import Path

from service.config import database_url_in

REPO_ROOT = Path(__file__).resolve().parents[1]

# argv[0] "python" is the image's interpreter in docker-compose; here it becomes sys.executable.
# The bind address comes from GUNICORN_CMD_ARGS, the one thing that differs between the two.
API_COMMAND: tuple[str, ...] = (
    "python",
    "-m",
    "gunicorn",
    # Two processes for two cores, four threads each: a request spends part of its time waiting
    # on SQLite or PostgreSQL, and a slow one (a report, a long record) does not hold up the
    # process's other callers. No keep-alive: a kept connection stays with the process that
    # accepted it, and the kernel often gave one process every connection (wrk at 2-8
    # connections: 450-490 req/s with one core idle, or 850-970 req/s, run to run). Closed after
    # each answer, a caller's next connection goes to whichever process is free first: 570-830
    # req/s at 2-8 connections in every run.
    "--workers",
    "2",
    "--worker-class",
    "gthread",
    "--threads",
    "4",
    "--keep-alive",
    "0",
    "--timeout",
    "60",
    "--graceful-timeout",
    "20",
    "--access-logfile",
    "-",
    # Report-link signatures and bearer tokens never reach the access log.
    "--logger-class",
    "service.access_log.RedactingAccessLogger",
    "service:create_app()",
)
WORKER_COMMAND: tuple[str, ...] = (
    "python",
    "-m",
    "celery",
    "-A",
    "workers.celery_app",
    "worker",
    "--loglevel",
    "INFO",
    # Gossip, mingle and heartbeats are cluster chatter a job queue does not need; the
    # filesystem broker has no cheap broadcast for them either.
    "--without-gossip",
    "--without-mingle",
    "--without-heartbeat",
)
HEALTH_PATH = "/healthz"
# The question the banner's curl line posts (service/examples/; a test posts it and expects 202).
EXAMPLE_FILE = "northbridge_bp_trial.json"
# The demo token's secret, kept (0600) so a restart prints the same token instead of a new one.
DEMO_TOKEN_FILE = "demo-token"
# How long each child gets to finish its work after the stop signal before it is killed.
STOP_GRACE_SECONDS = 25.0
# A worker process that dies (kill -9, the OOM killer) is started again, and the sweeper hands
# its job to the new one; more restarts than this within the window means something is broken
# (a bad setting, a full disk) and the launcher stops instead of looping.
RESTARTABLE = frozenset({"worker"})
MAX_RESTARTS = 5
RESTART_WINDOW_SECONDS = 120.0


def var_dir() -> Path:
    """Return the launcher's var/ folder (``SIZEWISE_VAR_DIR`` or the repository's var/)."""
    return Path(os.environ.get("SIZEWISE_VAR_DIR") or REPO_ROOT / "var").resolve()


def local_environment(base: Mapping[str, str] | None = None) -> dict[str, str]:
    """Return the child environment: embedded database and broker under var/ unless already set."""
    env = dict(os.environ if base is None else base)
    folder = Path(env.get("SIZEWISE_VAR_DIR") or REPO_ROOT / "var").resolve()
    env.setdefault("SIZEWISE_DATABASE_URL", database_url_in(folder))
    # filesystem:///abs/path puts the broker's folders under that path (service.config).
    env.setdefault("SIZEWISE_BROKER_URL", f"filesystem://{folder / 'broker'}")
    env.setdefault("SIZEWISE_PORT", "8000")
    # The launcher serves plain HTTP on 127.0.0.1, where a Secure cookie would never be sent.
    env.setdefault("SIZEWISE_DESK_SECURE_COOKIE", "0")
    # A local run's callback receiver is on this machine, without a certificate.
    env.setdefault("SIZEWISE_WEBHOOK_ALLOW_HTTP", "1")
    env["SIZEWISE_VAR_DIR"] = str(folder)
    args = f"--bind 127.0.0.1:{env['SIZEWISE_PORT']}"
    if _gunicorn_has_control_socket():
        # One shared ~/.gunicorn/gunicorn.ctl would make two local launchers fight over it.
        args += " --no-control-socket"
    env["GUNICORN_CMD_ARGS"] = args
    env.setdefault("PYTHONUNBUFFERED", "1")
    return env


def _gunicorn_has_control_socket() -> bool:
    from importlib.metadata import PackageNotFoundError, version

    try:
        major = int(version("gunicorn").split(".")[0])
    except (PackageNotFoundError, ValueError):
        return False
    return major >= 27  # the control socket (and its off switch) arrived in gunicorn 27


def local_argv(command: Sequence[str]) -> list[str]:
    """Return ``command`` with its interpreter replaced by the one running this launcher."""
    argv = list(command)
    if argv and argv[0] == "python":
        argv[0] = sys.executable
    return argv


def example_body() -> dict:
    """Return a ready-to-post request body: one of service/examples/*.json in protocol + requester."""
    path = REPO_ROOT / "service" / "examples" / EXAMPLE_FILE
    return {
        "protocol": {
            "id": "NGH-CRO-DEMO-01",
            "title": "Try-out request from the local launcher",
        },
        "requester": {
            "name": "Demo Investigator",
            "email": "investigator@northbridge.example",
            "department": "Clinical Research Office",
        },
        "question": json.loads(path.read_text()),
    }


def _read_kept_secret(path: Path) -> str | None:
    try:
        return path.read_text().strip() or None
    except FileNotFoundError:
        return None


def _keep_secret(path: Path, secret: str) -> None:
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    os.fchmod(fd, 0o600)
    with os.fdopen(fd, "w") as out:
        out.write(secret + "\n")


def prepare(env: Mapping[str, str]):
    """Create var/, migrate the database, load the demo and return the demo token (DemoToken)."""
    from service import demo
    from service.config import ensure_broker_folders, load_config
    from service.store.migrate import upgrade

    Path(env["SIZEWISE_VAR_DIR"]).mkdir(mode=0o700, parents=True, exist_ok=True)
    # The launcher's own settings are its children's: load_config() reads os.environ.
    os.environ.update(env)
    config = load_config()
    ensure_broker_folders(config)
    upgrade(config["DATABASE_URL"])
    loaded = demo.load(config)
    print(f"sizewise: demo protocols: {loaded} new", flush=True)
    from service.store.db import make_engine, make_sessionmaker, session_scope
    from service.store.tokens import ensure_demo_token

    kept_file = Path(env["SIZEWISE_VAR_DIR"]) / DEMO_TOKEN_FILE
    engine = make_engine(config["DATABASE_URL"])
    try:
        with session_scope(make_sessionmaker(engine)) as session:
            token = ensure_demo_token(session, _read_kept_secret(kept_file))
    finally:
        engine.dispose()
    if not token.kept:
        _keep_secret(kept_file, token.secret)
    return token


def open_private_log(path: Path):
    """Open a log for appending, readable by its owner only (0600), tightening an older one."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
    os.fchmod(fd, 0o600)
    return os.fdopen(fd, "ab")


def _die_with_parent() -> None:
    """In the child before exec: ask Linux to SIGTERM it if the launcher dies without cleanup."""
    if sys.platform.startswith("linux"):
        import ctypes

        pr_set_pdeathsig = 1
        ctypes.CDLL(None, use_errno=True).prctl(pr_set_pdeathsig, signal.SIGTERM)


class Supervisor:
    """Run child processes, forward a stop signal to them once, and kill what does not stop."""

    def __init__(self) -> None:
        self.children: dict[str, subprocess.Popen] = {}
        self.commands: dict[str, tuple[list[str], dict[str, str]]] = {}
        self.restarts: dict[str, list[float]] = {}
        self.stop_requested = threading.Event()

    def start(self, name: str, argv: list[str], env: Mapping[str, str]) -> None:
        """Start one child in a process group of its own, so only this launcher signals it.

        Its output goes to var/logs/<name>.log, so the banner on the terminal stays readable.
        """
        self.commands[name] = (list(argv), dict(env))
        logs = Path(env["SIZEWISE_VAR_DIR"]) / "logs"
        logs.mkdir(mode=0o700, parents=True, exist_ok=True)
        log_path = logs / f"{name}.log"
        with open_private_log(log_path) as log_file:
            # A signal to the launcher's group (Ctrl-C, kill -TERM -pgid) would otherwise also
            # hit the worker's pool processes directly and kill their jobs, not a warm shutdown.
            self.children[name] = subprocess.Popen(
                argv,
                env=dict(env),
                cwd=REPO_ROOT,
                process_group=0,
                preexec_fn=_die_with_parent,
                stdout=log_file,
                stderr=subprocess.STDOUT,
            )
        print(
            f"sizewise: started {name} (pid {self.children[name].pid}, log {log_path})", flush=True
        )

    def restart(self, name: str) -> bool:
        """Start an exited restartable child again; False when it may not (or too often).

        What the dead process forked (an orphaned pool child still computing) is killed first:
        its job's lease then expires and the sweeper hands the job to the new process.
        """
        if name not in RESTARTABLE or self.stop_requested.is_set():
            return False
        now = time.monotonic()
        recent = [t for t in self.restarts.get(name, []) if now - t < RESTART_WINDOW_SECONDS]
        if len(recent) >= MAX_RESTARTS:
            return False
        self.restarts[name] = [*recent, now]
        old = self.children[name]
        try:
            os.killpg(old.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        old.wait()
        print(f"sizewise: {name} exited (code {old.returncode}); starting it again", flush=True)
        argv, env = self.commands[name]
        self.start(name, argv, env)
        return True

    def request_stop(self, signum: int, _frame: object) -> None:
        """Signal handler: remember that a stop was asked for."""
        self.stop_requested.set()

    def exited(self) -> str | None:
        """Return the name of a child that has exited on its own, if any."""
        for name, proc in self.children.items():
            if proc.poll() is not None:
                return name
        return None

    def stop(self) -> bool:
        """Forward SIGTERM to every child, wait, then SIGKILL stragglers; True when none needed it."""
        for proc in self.children.values():
            if proc.poll() is None:
                try:
                    proc.send_signal(signal.SIGTERM)
                except ProcessLookupError:
                    pass
        deadline = time.monotonic() + STOP_GRACE_SECONDS
        clean = True
        for name, proc in self.children.items():
            try:
                proc.wait(timeout=max(deadline - time.monotonic(), 0.1))
            except subprocess.TimeoutExpired:
                print(f"sizewise: {name} did not stop in time; killing it", flush=True)
                clean = False
            try:
                os.killpg(proc.pid, signal.SIGKILL)  # stragglers: the child and what it forked
            except ProcessLookupError:
                pass
            proc.wait()
        return clean


def wait_until_healthy(port: int, sup: Supervisor, timeout: float = 60.0) -> bool:
    """Poll the API's health endpoint until it answers 200, a child dies, or time runs out."""
    from urllib.error import URLError
    from urllib.request import urlopen

    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline and not sup.stop_requested.is_set():
        if sup.exited():
            return False
        try:
            with urlopen(f"http://127.0.0.1:{port}{HEALTH_PATH}", timeout=2) as resp:
                if resp.status == 200:
                    return True
        except (URLError, OSError):
            pass
        time.sleep(0.3)
    return False


def demo_token_lines(folder: Path, demo) -> str:
    """What the banner says about the demo token: kept from the last start, or new and why."""
    kept_file = folder / DEMO_TOKEN_FILE
    if demo.kept:
        return (
            f"demo statistician token (kept from the last start, in {kept_file}): {demo.secret}\n"
        )
    lines = (
        f"demo statistician token (new, kept in {kept_file} for the next starts): {demo.secret}\n"
    )
    if demo.revoked:
        lines += (
            f"  the earlier demo token ({', '.join(demo.revoked)}) was revoked: its secret was not "
            f"in {kept_file}, so it could not be shown again\n"
        )
    return lines


def print_banner(port: int, folder: Path, demo) -> None:
    """Print the URL, the demo token and a curl example that posts a request and reads it back."""
    body_file = folder / "example-request.json"
    try:
        body_file.write_text(json.dumps(example_body(), indent=2) + "\n")
    except FileNotFoundError as exc:  # a broken checkout; the service itself runs without it
        print(f"sizewise: no example body written: {exc}", flush=True)
    token = demo.secret
    url = f"http://127.0.0.1:{port}"
    print(
        f"\nsizewise is running at {url}  (Ctrl-C stops it)\n"
        f"{demo_token_lines(folder, demo)}\n"
        f"the desk: open {url}/desk/ and sign in with that token\n\n"
        f"  export SIZEWISE_TOKEN={token}\n"
        f'  curl -s -X POST {url}/v1/requests -H "Authorization: Bearer $SIZEWISE_TOKEN" \\\n'
        f"       -H 'Content-Type: application/json' --data @{body_file}\n"
        f'  curl -s -H "Authorization: Bearer $SIZEWISE_TOKEN" {url}/v1/requests/<id>\n',
        flush=True,
    )


def print_report_links(port: int) -> None:
    """Print a signed browser link to each demo request's report (it opens once computed)."""
    from sqlalchemy import select

    from service import demo
    from service.api.auth import link_generation, link_key, sign_link
    from service.config import load_config
    from service.store.db import make_engine, make_sessionmaker, session_scope
    from service.store.models import Request
    from service.store.types import utcnow

    config = load_config()
    keys = [key for key, _body in demo.PROTOCOLS]
    engine = make_engine(config["DATABASE_URL"])
    try:
        with session_scope(make_sessionmaker(engine)) as session:
            rows = [
                (request_id, protocol_id, link_generation(session, request_id))
                for request_id, protocol_id in session.execute(
                    select(Request.id, Request.protocol_id).where(Request.idempotency_key.in_(keys))
                )
            ]
    finally:
        engine.dispose()
    if not rows:
        return
    # The API signs with the same key: SIZEWISE_SECRET_KEY, or the key file under var/.
    key = link_key(config)
    expires = utcnow() + timedelta(hours=24)
    print("demo reports (browser links, valid 24 h; each opens once its request is computed):")
    for request_id, protocol_id, generation in sorted(rows, key=lambda r: r[1]):
        token = sign_link(key, request_id, expires, generation)
        print(
            f"  {protocol_id}: http://127.0.0.1:{port}/v1/requests/{request_id}/report?link={token}"
        )
    print(
        '  a new link: curl -s -X POST -H "Authorization: Bearer $SIZEWISE_TOKEN" '
        f"http://127.0.0.1:{port}/v1/requests/<id>/report-links\n",
        flush=True,
    )


def main() -> int:
    """Prepare var/, start a Celery worker and the API, and supervise them until told to stop."""
    # Everything the launcher and its children create under var/ (database, logs, broker
    # messages, the link key) is for the service's user only.
    os.umask(0o077)
    env = local_environment()
    port = int(env["SIZEWISE_PORT"])
    sup = Supervisor()
    signal.signal(signal.SIGTERM, sup.request_stop)
    signal.signal(signal.SIGINT, sup.request_stop)
    try:
        token = prepare(env)
    except Exception as exc:  # a launcher reports the cause in one line, not a traceback
        print(f"sizewise: could not prepare {env['SIZEWISE_VAR_DIR']}: {exc}", file=sys.stderr)
        return 1
    if sup.stop_requested.is_set():
        return 0
    sup.start("worker", local_argv(WORKER_COMMAND), env)
    sup.start("api", local_argv(API_COMMAND), env)
    failed = None
    if wait_until_healthy(port, sup):
        print_banner(port, Path(env["SIZEWISE_VAR_DIR"]), token)
        try:
            print_report_links(port)
        except Exception as exc:  # the links are a convenience; the service runs without them
            print(f"sizewise: no report links ({exc})", flush=True)
        while not sup.stop_requested.wait(0.5):
            failed = sup.exited()
            if failed and sup.restart(failed):
                failed = None
            elif failed:
                break
    elif not sup.stop_requested.is_set():
        failed = sup.exited() or "api (not healthy in time)"
    if failed:
        print(f"sizewise: {failed} stopped unexpectedly; shutting down", file=sys.stderr)
    clean = sup.stop()
    print("sizewise: stopped", flush=True)
    return 0 if clean and not failed else 1


if __name__ == "__main__":
    sys.exit(main())
