"""The ``sizewise`` command: JSON in, canonical JSON out, field-by-field errors, exit codes."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from scipy import stats

import service.cli as cli
from service.engine import EngineError, canonical_json, designs, verify

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "service" / "examples"
SIZEWISE = ROOT / ".venv" / "bin" / "sizewise"
TWO = {"outcome": "continuous", "layout": "two_groups"}


def run(*args: str, stdin: str | None = None) -> subprocess.CompletedProcess:
    """Run the installed command (falls back to ``python -m service.cli``)."""
    cmd = [str(SIZEWISE)] if SIZEWISE.exists() else [sys.executable, "-m", "service.cli"]
    return subprocess.run(
        [*cmd, *args], input=stdin, capture_output=True, text=True, cwd=ROOT, timeout=300
    )


def write(tmp_path: Path, question) -> str:
    path = tmp_path / "q.json"
    path.write_text(question if isinstance(question, str) else json.dumps(question))
    return str(path)


# ----- error paths ----------------------------------------------------------------------------


def test_invalid_question_exits_2_with_field_list(tmp_path: Path) -> None:
    out = run(
        "compute",
        write(
            tmp_path,
            {
                "outcome": "continuous",
                "layout": "two_groups",
                "alpha": 1.5,
                "effect": {"difference": 0.5},
                "assumptions": {"sd": -1},
            },
        ),
    )
    assert out.returncode == 2 and out.stdout == ""
    assert "alpha: must be in (0, 0.5]; got 1.5" in out.stderr
    assert "assumptions.sd: must be > 0; got -1" in out.stderr
    assert "Traceback" not in out.stderr


@pytest.mark.parametrize(
    "text, needle",
    [
        ('{"outcome": "continuous",', "not valid JSON"),
        ('{"outcome": "continuous", "alpha": NaN}', "NaN is not a JSON number"),
        ("[1, 2]", "question: must be a JSON object"),
        ("", "not valid JSON"),
    ],
)
def test_bad_json_exits_2(tmp_path: Path, text: str, needle: str) -> None:
    out = run("compute", write(tmp_path, text))
    assert out.returncode == 2 and needle in out.stderr and "Traceback" not in out.stderr


def test_missing_file_exits_2(tmp_path: Path) -> None:
    out = run("compute", str(tmp_path / "absent.json"))
    assert out.returncode == 2 and "cannot read" in out.stderr and "Traceback" not in out.stderr


def test_engine_error_exits_1(monkeypatch, capsys, tmp_path: Path) -> None:
    def failing(question, **kwargs):
        raise EngineError("the search did not bracket a solution")

    monkeypatch.setattr("service.engine.compute", failing)
    question = {"outcome": "association", "layout": "single_group", "effect": {"r": 0.3}}
    code = cli.main(["compute", write(tmp_path, question)])
    err = capsys.readouterr().err
    assert code == 1 and "the search did not bracket a solution" in err


def test_seed_is_drawn_when_a_simulation_has_none(monkeypatch, capsys, tmp_path: Path) -> None:
    seen = {}

    def capture(question, **kwargs):
        seen.update(question)
        return {"question": question}

    monkeypatch.setattr("service.engine.compute", capture)
    monkeypatch.setattr("service.engine.draw_seed", lambda: 4242)
    raw = {**TWO, "method": "simulation", "effect": {"difference": 0.5}, "assumptions": {"sd": 1}}
    assert cli.main(["compute", write(tmp_path, raw)]) == 0
    assert seen["simulation"]["seed"] == 4242
    assert json.loads(capsys.readouterr().out)["question"]["simulation"]["seed"] == 4242


def test_validate_reads_stdin_and_prints_normalized_question() -> None:
    stdin = '{"outcome": "association", "layout": "single_group", "effect": {"r": 0.3}}'
    out = run("validate", "-", stdin=stdin)
    assert out.returncode == 0, out.stderr
    q = json.loads(out.stdout)
    assert q["effect"] == {"r": 0.3} and q["assumptions"] == {"r_null": 0.0}
    assert q["analysis"] == "pearson"
    assert out.stdout.strip() == canonical_json(q)


def test_registry_holds_compute_and_takes_new_commands(capsys) -> None:
    assert {"compute", "validate", "examples"} <= set(cli.COMMANDS)

    @cli.subcommand("hello", "say hello", cli.arg("--name", default="Northbridge"))
    def hello(args) -> int:
        print(f"hello {args.name}")
        return 0

    try:
        assert cli.main(["hello", "--name", "ward 7"]) == 0
        assert capsys.readouterr().out == "hello ward 7\n"
    finally:
        del cli.COMMANDS["hello"]


def test_examples_are_listed_and_all_valid() -> None:
    out = run("examples")
    names = out.stdout.split()
    assert out.returncode == 0 and len(names) >= 8
    assert {p.stem for p in EXAMPLES.glob("*.json")} == set(names)
    cells = set()
    for name in names:
        shown = run("examples", name)
        assert shown.returncode == 0
        question = json.loads(shown.stdout)
        cells.add((question["outcome"], question["layout"]))
        assert run("validate", str(EXAMPLES / f"{name}.json")).returncode == 0
    # one example or more per registered cell
    assert cells == {(d.outcome, d.layout) for d in designs.all()}


def test_python_dash_m_works() -> None:
    out = subprocess.run(
        [sys.executable, "-m", "service.cli", "examples"],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=120,
    )
    assert out.returncode == 0 and "northbridge_bp_trial" in out.stdout


# ----- help: each subcommand describes itself and only its own options ------------------------


@pytest.mark.parametrize("name", sorted(cli.COMMANDS))
def test_each_subcommand_help_describes_it_and_only_its_options(name: str, capsys) -> None:
    with pytest.raises(SystemExit) as done:
        cli.main([name, "--help"])
    assert done.value.code == 0
    text = capsys.readouterr().out
    command = cli.COMMANDS[name]
    assert text.startswith(f"usage: sizewise {name}")
    # its own description, first line and more
    assert command.description.splitlines()[0] in text and len(command.description) > len(
        command.help
    )
    own = {flag for a in command.args for flag in a.flags if flag.startswith("-")}
    for option in own:
        assert option in text
    others = {
        flag
        for other in cli.COMMANDS.values()
        if other.name != name
        for a in other.args
        for flag in a.flags
        if flag.startswith("-")
    } - own
    for option in others:
        assert option not in text, f"{name} --help shows {option} of another subcommand"
    for other in cli.COMMANDS.values():
        if other.name != name:
            assert other.description.splitlines()[0] not in text


def test_help_words_follow_the_vocabulary(capsys) -> None:
    with pytest.raises(SystemExit):
        cli.main(["compute", "--help"])
    text = capsys.readouterr().out
    # the question document is described in the words of the API (VOCAB §1)
    for word in ("outcome", "layout", "effect", "assumptions", '"question"'):
        assert word in text


# ----- happy paths (need service.engine.compute) ----------------------------------------------


def test_compute_analytic_matches_cohen(tmp_path: Path) -> None:
    # published 64 per group: Cohen 1988, Table 2.4.1 (d = 0.5, two-sided alpha .05, power .80)
    out = run(
        "compute",
        write(tmp_path, {**TWO, "effect": {"difference": 0.5}, "assumptions": {"sd": 1.0}}),
    )
    assert out.returncode == 0, out.stderr
    record = json.loads(out.stdout)
    assert record["sample_size"]["per_group"] == [64, 64]
    assert verify(record)
    assert out.stdout.strip() == canonical_json(record)


def test_compute_example_and_pretty(tmp_path: Path) -> None:
    path = str(EXAMPLES / "northbridge_bp_trial.json")
    plain, pretty = run("compute", path), run("compute", "--pretty", path)
    assert plain.returncode == 0 and pretty.returncode == 0, plain.stderr + pretty.stderr
    record = json.loads(plain.stdout)
    assert pretty.stdout.strip() == json.dumps(record, indent=2, sort_keys=True, ensure_ascii=False)
    assert verify(record)


def test_compute_simulation_is_byte_identical_for_a_seed() -> None:
    path = str(EXAMPLES / "northbridge_bp_trial_simulated.json")
    first, second = run("compute", path), run("compute", path)
    assert first.returncode == 0, first.stderr
    assert first.stdout == second.stdout
    record = json.loads(first.stdout)
    assert record["reproducibility"]["seed"] == 20240611
    # formula: noncentral t power at d = 5/12, n = 64 per group, two-sided alpha .05, recomputed
    # with scipy; the simulated estimate must lie within 4 Monte Carlo standard errors
    n, d = 64, 5 / 12
    df, nc = 2 * n - 2, d * (n / 2) ** 0.5
    t = stats.t.ppf(0.975, df)
    exact = stats.nct.sf(t, df, nc) + stats.nct.cdf(-t, df, nc)
    power = record["power"]
    assert abs(power["estimate"] - exact) <= 4 * power["mcse"]
