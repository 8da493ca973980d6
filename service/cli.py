"""The ``sizewise`` command.

Sub-commands live in one registry; adding one is a decorated function whose docstring is the
text ``sizewise NAME --help`` prints above that sub-command's own options::

    @subcommand("serve", "run the HTTP API", arg("--port", type=int, default=8000))
    def serve(args: argparse.Namespace) -> int:
        '''Run the HTTP API on the given port.'''
        ...

Exit codes: 0 success, 1 the engine failed, 2 bad input (unreadable file, invalid JSON or an
invalid question; the errors go to stderr field by field, never as a traceback).
"""

from __future__ import annotations

import argparse
import inspect
import json
import os
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from importlib import resources
from typing import Any

EXIT_OK, EXIT_ENGINE, EXIT_INPUT = 0, 1, 2
EXIT_CODES = "exit codes: 0 success, 1 the engine or the database failed, 2 bad input"


class InputError(Exception):
    """Input the command cannot use: unreadable file or invalid JSON (exit 2)."""


@dataclass(frozen=True)
class Arg:
    """Positional and keyword arguments for ``ArgumentParser.add_argument``."""

    flags: tuple[str, ...]
    options: dict[str, Any] = field(default_factory=dict)


def arg(*flags: str, **options: Any) -> Arg:
    """Declare one argument of a sub-command."""
    return Arg(flags, options)


@dataclass(frozen=True)
class Command:
    """A registered sub-command: ``help`` is its line in the command list, ``description`` the
    text of its own ``--help`` (the run function's docstring)."""

    name: str
    help: str
    args: tuple[Arg, ...]
    run: Callable[[argparse.Namespace], int]
    description: str = ""


COMMANDS: dict[str, Command] = {}


def subcommand(name: str, help: str, *args: Arg, description: str | None = None) -> Callable:
    """Register the decorated ``run(args) -> exit code`` function as ``sizewise NAME``.

    ``description`` (kept as written) is the longer text of ``sizewise NAME --help``.
    """

    def register(run: Callable[[argparse.Namespace], int]) -> Callable[[argparse.Namespace], int]:
        text = description or inspect.cleandoc(run.__doc__ or help)
        COMMANDS[name] = Command(name, help, args, run, text)
        return run

    return register


# ---------------------------------------------------------------------------------------------
# I/O helpers


def _refuse_constant(name: str) -> Any:
    raise ValueError(f"{name} is not a JSON number")


def parse_json(text: str, source: str) -> Any:
    """Parse strict JSON (NaN and Infinity refused); raise InputError naming the position."""
    try:
        return json.loads(text, parse_constant=_refuse_constant)
    except json.JSONDecodeError as exc:
        raise InputError(
            f"{source} is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}"
        ) from None
    except ValueError as exc:
        raise InputError(f"{source} is not valid JSON: {exc}") from None


def read_json(path: str) -> Any:
    """Read a JSON document from a file path, or from stdin when ``path`` is '-'."""
    if path == "-":
        return parse_json(sys.stdin.read(), "stdin")
    try:
        with open(path, encoding="utf-8") as fh:
            text = fh.read()
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read {path}: {getattr(exc, 'strerror', None) or exc}") from None
    return parse_json(text, path)


def dump(value: Any, pretty: bool) -> str:
    """Canonical JSON (the hashed form), or indented sorted JSON for people."""
    from service.engine import canonical_json

    if pretty:
        return json.dumps(value, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False)
    return canonical_json(value)


def print_errors(title: str, errors: dict[str, list[str]]) -> None:
    """Print field-keyed errors to stderr, one line per message."""
    print(f"sizewise: {title}", file=sys.stderr)
    for path in sorted(errors):
        for message in errors[path]:
            print(f"  {path}: {message}", file=sys.stderr)


def _load(path: str) -> dict:
    from service.schemas import load_question

    return load_question(read_json(path))


# ---------------------------------------------------------------------------------------------
# Sub-commands

_FILE = arg("file", metavar="FILE", help="question as JSON; '-' reads stdin")
_PRETTY = arg("--pretty", action="store_true", help="indent and sort keys for reading")


class ProgressBar:
    """A one-line bar on stderr for long local simulations (the record on stdout stays clean)."""

    WIDTH = 30

    def __init__(self, stream=None):
        self.stream = stream or sys.stderr
        self.shown = -1

    def __call__(self, fraction: float) -> None:
        filled = int(round(max(0.0, min(1.0, fraction)) * self.WIDTH))
        if filled == self.shown:
            return
        self.shown = filled
        bar = "#" * filled + "-" * (self.WIDTH - filled)
        end = "\n" if filled == self.WIDTH else ""
        print(f"\rsimulating [{bar}] {fraction:4.0%}", end=end, file=self.stream, flush=True)


@subcommand(
    "compute",
    "answer a question and print the result record",
    _FILE,
    _PRETTY,
    arg("--progress", action="store_true", help="show a progress bar on stderr while simulating"),
)
def compute_command(args: argparse.Namespace) -> int:
    """Answer a question and print its result record as canonical JSON (the hashed form).

    FILE holds the same question document as the "question" member of a request posted to the
    API: outcome, layout, find, effect, assumptions and the rest. A simulation without a seed
    gets one drawn from the operating system, and the record states it, so the answer can be
    reproduced. An invalid question prints one line per field and exits 2.
    """
    from service.engine import EngineError, QuestionError, compute, draw_seed

    question = _load(args.file)
    sim = question.get("simulation")
    if sim is not None and sim.get("seed") is None:
        sim["seed"] = draw_seed()
    show = args.progress or (sim is not None and sys.stderr.isatty())
    try:
        record = compute(question, progress=ProgressBar() if show and sim is not None else None)
    except QuestionError as exc:
        print_errors("the question cannot be answered as posed:", exc.as_errors())
        return EXIT_INPUT
    except EngineError as exc:
        print(f"sizewise: the engine failed: {exc}", file=sys.stderr)
        return EXIT_ENGINE
    print(dump(record, args.pretty))
    return EXIT_OK


@subcommand("validate", "check a question and print its normalized form", _FILE, _PRETTY)
def validate_command(args: argparse.Namespace) -> int:
    """Check a question without answering it and print its normalized form.

    The normalized form keeps what was entered and fills every default (analysis, alpha,
    alternative, target power, adjustments): it is the question a result record stores. An
    invalid question prints one line per field and exits 2.
    """
    print(dump(_load(args.file), args.pretty))
    return EXIT_OK


def example_names() -> list[str]:
    """Names of the example questions shipped in ``service/examples``."""
    root = resources.files("service.examples")
    return sorted(p.name[:-5] for p in root.iterdir() if p.name.endswith(".json"))


@subcommand(
    "examples",
    "list the example questions, or print one",
    arg("name", nargs="?", help="an example name (without .json)"),
)
def examples_command(args: argparse.Namespace) -> int:
    """List the example questions shipped with sizewise, or print one of them.

    The examples are invented studies of the Northbridge General Hospital research office, one
    or more per outcome and layout; a printed example can be passed to compute or validate.
    """
    names = example_names()
    if args.name is None:
        print("\n".join(names))
        return EXIT_OK
    if args.name not in names:
        print(f"sizewise: no example {args.name!r}; available: {', '.join(names)}", file=sys.stderr)
        return EXIT_INPUT
    print(
        resources.files("service.examples").joinpath(f"{args.name}.json").read_text("utf-8"), end=""
    )
    return EXIT_OK


def _versions(values: dict) -> str:
    return ", ".join(f"{k} {v}" for k, v in sorted(values.items())) or "not stated"


VERIFY_HELP = """\
Check an audit bundle (GET /v1/requests/{id}/bundle) with no server and no database.

It recomputes the record from the bundle's question and seed, and checks every hash against
the bundle's own content: the record's hash, the question and the submission against the
'submitted' event, the record against the 'computed' event, each audit event's chain hash and
the chain segment link by link. It prints one line per check, then "identical" or the fields
that differ, and the versions that computed the record and that checked it.

Exit status: 0 identical and every hash holds; 1 something differs or a hash fails;
2 the file is not a bundle (the field at fault is named).

To check with the versions that computed the record, rebuild that environment from the
repository's lock file first (README, "Audit bundles").
"""


@subcommand(
    "verify",
    "recompute an audit bundle and check its hashes, with no server and no database",
    arg("bundle", metavar="BUNDLE", help="the bundle file; '-' reads stdin"),
    arg("--progress", action="store_true", help="show a progress bar on stderr while simulating"),
    description=VERIFY_HELP,
)
def verify_command(args: argparse.Namespace) -> int:
    """Print each check, then identical or the differing fields, and both environments."""
    from service.bundle.check import FAILED, BundleError, verify_bundle

    data = read_json(args.bundle)
    simulated = isinstance(data, dict) and (data.get("seed_scheme") or {}).get("scheme")
    show = args.progress or (bool(simulated) and sys.stderr.isatty())
    try:
        verdict = verify_bundle(data, progress=ProgressBar() if show else None)
    except BundleError as exc:
        raise InputError(
            f"{args.bundle} is not an audit bundle this sizewise reads: {exc}"
        ) from None
    print(f"bundle of request {data['request']['id']} (exported {data.get('exported_at', '?')})")
    for check in verdict.checks:
        print(f"  {check.outcome:<11} {check.name}: {check.detail}")
    if verdict.identical:
        print("identical: the recomputed record matches the bundle's, digit for digit")
    else:
        print(f"DIFFERS: the recomputed record differs in {len(verdict.differences)} field(s):")
        for path in verdict.differences[:50]:
            print(f"  {path}")
        if len(verdict.differences) > 50:
            print(f"  … and {len(verdict.differences) - 50} more")
    print(f"computed with: {_versions(verdict.computed_with)}")
    print(f"verified with: {_versions(verdict.verified_with)}")
    failed = [c.name for c in verdict.checks if c.outcome == FAILED]
    if failed:
        print(f"sizewise: verification failed: {', '.join(failed)}", file=sys.stderr)
    return EXIT_OK if verdict.passed else EXIT_ENGINE


# ---------------------------------------------------------------------------------------------
# Tokens and the audit trail (run against the configured database)


class DatabaseError(Exception):
    """The configured database cannot be used (exit 1)."""


def _require_sqlite_file(url: str) -> None:
    """Refuse a SQLite database file that does not exist (opening it would create an empty one)."""
    from pathlib import Path

    from sqlalchemy.engine import make_url

    parsed = make_url(url)
    if parsed.get_backend_name() != "sqlite" or parsed.database in (None, "", ":memory:"):
        return
    path = Path(parsed.database)
    if not path.exists():
        raise DatabaseError(
            f"the database file {path} does not exist. sizewise reads SIZEWISE_DATABASE_URL, "
            "else sizewise.db under SIZEWISE_VAR_DIR (or the repository's var/): check them, or "
            "create the database with `make run` (it migrates it and loads the demo) or "
            "`.venv/bin/alembic upgrade head` in the repository with the same settings"
        )


@contextmanager
def _database_session() -> Iterator[Any]:
    """A committed-on-success session on the configured database; its errors become one line."""
    from sqlalchemy.exc import SQLAlchemyError

    from service.config import load_config
    from service.store.db import make_engine, make_sessionmaker, session_scope

    url = load_config()["DATABASE_URL"]
    _require_sqlite_file(url)
    engine = make_engine(url)
    try:
        with session_scope(make_sessionmaker(engine)) as session:
            yield session
    except SQLAlchemyError as exc:
        shown = engine.url.render_as_string(hide_password=True)
        raise DatabaseError(
            f"cannot use the database {shown} (is it migrated? `alembic upgrade head`, run in "
            f"the repository with the same settings, migrates it): {type(exc).__name__}: "
            f"{str(getattr(exc, 'orig', exc)).splitlines()[0]}"
        ) from None
    finally:
        engine.dispose()


def _cli_actor() -> str:
    """The audit actor of a command run on the database's machine: 'cli:<login>'."""
    import getpass

    try:
        return f"cli:{getpass.getuser()}"
    except (KeyError, OSError):  # no login name in a bare container
        return "cli"


def _stamp(value) -> str:
    return value.isoformat(timespec="seconds") if value is not None else "-"


@subcommand(
    "tokens",
    "issue, list or revoke API tokens",
    arg("action", choices=("create", "list", "revoke"), help="what to do"),
    arg("token_id", nargs="?", metavar="ID", help="the token to revoke"),
    arg("--role", help="role of a new token: intake, statistician, auditor or admin"),
    arg("--name", help="who holds a new token (default: the role)"),
)
def tokens_command(args: argparse.Namespace) -> int:
    """Issue, list or revoke the API tokens of the configured database.

    create prints the new token's id, role and name, then its secret on the last line (shown
    only once); list prints one line per token; revoke ID ends a token at once. Each change is
    written to the audit trail.
    """
    from service.store import tokens

    if args.action == "create" and args.role is None:
        raise InputError("tokens create needs --role (intake, statistician, auditor or admin)")
    if args.action == "revoke" and args.token_id is None:
        raise InputError("tokens revoke needs the token ID (see 'sizewise tokens list')")
    if args.action != "revoke" and args.token_id is not None:
        raise InputError(f"tokens {args.action} takes no ID; got {args.token_id!r}")
    lines: list[str] = []
    with _database_session() as session:
        if args.action == "create":
            try:
                token_id, secret = tokens.create_token(
                    session,
                    args.role,
                    args.name if args.name is not None else args.role,
                    actor=_cli_actor(),
                )
            except tokens.TokenInputError as exc:
                raise InputError(str(exc)) from None
            row = tokens.get_token(session, token_id)
            lines += [f"id: {row.id}", f"role: {row.role}", f"name: {row.name}"]
            lines += ["the token below is shown only now; store it safely:", secret]
        elif args.action == "list":
            for row in tokens.list_tokens(session):
                state = f"revoked {_stamp(row.revoked_at)}" if row.revoked_at else "active"
                lines.append(
                    f"{row.id}  {row.role:<12}  {state:<33}  created {_stamp(row.created_at)}"
                    f"  last used {_stamp(row.last_used_at)}  {row.name}"
                )
        else:
            row = tokens.revoke_token(session, args.token_id, actor=_cli_actor())
            if row is None:
                raise InputError(f"no token with id {args.token_id!r}")
            lines.append(f"revoked {row.id} ({row.name}, {row.role}) at {_stamp(row.revoked_at)}")
    # Printed only after the commit: a token shown to the user is a token that exists.
    if lines:
        print("\n".join(lines))
    return EXIT_OK


def audit_report(session, anchors=None):
    """Verify the audit trail and every stored row against it; return the verification Report."""
    from service.store.verify import verify_store

    return verify_store(session, anchors)


@subcommand(
    "audit",
    "check the audit trail",
    arg("action", choices=("verify",), help="what to do"),
    arg(
        "--anchor",
        metavar="FILE",
        help="anchor file kept outside the database: the chain must still contain every head "
        "recorded there, and the new head is appended once the check passes",
    ),
)
def audit_command(args: argparse.Namespace) -> int:
    """Verify the audit trail of the configured database; exit 1 on findings.

    Checks the hash chain, then every stored question, result, status and token against its
    event. Prints one line per finding, the rows too old to be covered, the summary and the
    anchor (head event id and hash) an auditor keeps to detect deleted events at the next run.
    """
    from pathlib import Path

    from service.store.verify import AnchorFileError, append_anchor, read_anchors

    path = Path(args.anchor) if args.anchor else None
    try:
        anchors = read_anchors(path) if path is not None else []
    except AnchorFileError as exc:
        raise InputError(str(exc)) from None
    with _database_session() as session:
        report = audit_report(session, anchors)
    for finding in report.findings:
        print(f"sizewise: {finding}", file=sys.stderr)
    for what, ids in report.not_covered.items():
        shown = ", ".join(ids[:5]) + (f" and {len(ids) - 5} more" if len(ids) > 5 else "")
        print(
            f"not covered (recorded before the audit events held their hashes): {len(ids)} {what}: {shown}"
        )
    print(report.summary())
    if report.head is not None:
        print(f"anchor: event {report.head.event} sha256 {report.head.sha256}")
    if not report.intact:
        return EXIT_ENGINE
    if path is not None and report.head is not None:
        append_anchor(path, report.head)
        print(f"anchor appended to {path} ({len(anchors)} earlier anchor(s) still in the chain)")
    return EXIT_OK


# ---------------------------------------------------------------------------------------------
# Entry point


def _report_source(source: str) -> tuple[dict, dict]:
    """(request detail, record) from a record/detail JSON file or a stored request id."""
    from pathlib import Path

    if source == "-" or Path(source).exists():
        data = read_json(source)
        if isinstance(data, dict) and isinstance(data.get("result"), dict):
            return data, data["result"]
        if isinstance(data, dict) and "sample_size" in data and "question" in data:
            return {
                "id": Path(source).stem if source != "-" else "local",
                "status": "computed",
            }, data
        if isinstance(data, dict) and "find" in data:
            # A question names its unknown; a record holds it under "question".
            raise InputError(
                f"{source} is a question, not a result record: compute it first, e.g. "
                f"`sizewise compute {source} > record.json`, then `sizewise report record.json`"
            )
        raise InputError(f"{source}: neither a result record nor a request with a result")
    from service.api.render import request_detail
    from service.store.models import Request

    with _database_session() as session:
        row = session.get(Request, source)
        if row is None:
            raise InputError(f"no file and no stored request called {source!r}")
        detail = request_detail(session, row)
    if detail["result"] is None:
        raise InputError(f"request {source} has no result yet (status {detail['status']!r})")
    return detail, detail["result"]


@subcommand(
    "report",
    "write the HTML report and the power curve (SVG) of a record or a stored request",
    arg("source", metavar="ID|FILE", help="a stored request id, or a result record as JSON"),
    arg("--out", default=".", help="folder to write into (default: the current folder)"),
)
def report_command(args: argparse.Namespace) -> int:
    """Write the HTML report and the power curve (SVG) of a result record or a stored request.

    The source is a stored request id (read from the configured database) or a JSON file
    holding a result record or a request with its result. Writes
    sizewise-report-<id>.html and .svg into the folder and prints the HTML file's path.
    """
    from pathlib import Path

    from service.reports.plots import curve_points, power_curve_svg
    from service.reports.render import render_report

    try:
        detail, record = _report_source(args.source)
    except DatabaseError as exc:
        print(f"sizewise: {exc}", file=sys.stderr)
        return EXIT_ENGINE
    svg = power_curve_svg(curve_points(record))
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    name = f"sizewise-report-{detail.get('id') or 'local'}"
    (out / f"{name}.svg").write_text(svg, encoding="utf-8")
    (out / f"{name}.html").write_text(
        render_report(detail, record, curve_svg=svg), encoding="utf-8"
    )
    print(out / f"{name}.html")
    return EXIT_OK


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every registered sub-command."""
    parser = argparse.ArgumentParser(
        prog="sizewise", description="Sample-size and power answers for study protocols."
    )
    subs = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for command in COMMANDS.values():
        sub = subs.add_parser(
            command.name,
            help=command.help,
            description=command.description,
            epilog=EXIT_CODES,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        for a in command.args:
            sub.add_argument(*a.flags, **a.options)
        sub.set_defaults(run=command.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the ``sizewise`` command line and return its exit code."""
    from service.schemas import QuestionInvalid

    args = build_parser().parse_args(argv)
    try:
        return args.run(args)
    except BrokenPipeError:
        # The reader stopped early (e.g. `| head`): not an error of the question or the engine.
        sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - silence the flush at exit
        return EXIT_OK
    except InputError as exc:
        print(f"sizewise: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except QuestionInvalid as exc:
        print_errors("the question is invalid:", exc.errors)
        return EXIT_INPUT
    except DatabaseError as exc:
        print(f"sizewise: {exc}", file=sys.stderr)
        return EXIT_ENGINE


if __name__ == "__main__":
    sys.exit(main())
