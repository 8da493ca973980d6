"""The power curve: power against n per group around the answer, as data and as a drawing.

``curve_points`` asks the engine (find = power) at about a dozen sizes and returns plain data,
with a title and the assumptions it was drawn under (design, analysis, alpha, alternative,
effect, assumptions, adjustments) so that a saved drawing stands alone in a document;
``power_curve_svg`` / ``power_curve_png`` only draw it. The SVG's elements carry ids
(``target-line``, ``chosen-n``, ``analytic-curve``, ``simulated-points``) so tests and the page
can find them. ``sensitivity_svg`` draws a sensitivity grid (``service.engine.explore``): the
answer against the grid's first axis, one line per value of the second (ids
``sensitivity-axes``, ``sensitivity-line-<i>``).
"""

from __future__ import annotations

import copy
import io
import math
import re
import textwrap

import matplotlib

matplotlib.use("Agg")  # no display on servers and workers; must precede any pyplot import

from matplotlib.figure import Figure  # noqa: E402  (after the backend is chosen)
from matplotlib.ticker import PercentFormatter  # noqa: E402

from service.engine import QuestionError, compute  # noqa: E402

from . import describe  # noqa: E402

__all__ = [
    "curve_points",
    "power_curve_png",
    "power_curve_svg",
    "sensitivity_lines",
    "sensitivity_svg",
]

DEFAULT_POINTS = 12
DEFAULT_SPAN = (0.5, 1.5)
CURVE_REPLICATES = 1000  # per simulated point: MCSE ≤ 0.016, enough to see the curve's shape
_MIN_N = 2  # sizes a design cannot take (too few for its df) are left out point by point

_INK = "#1d2733"
_ANALYTIC = "#1f5fa8"
_SIMULATED = "#b34700"
_TARGET = "#5b6b7a"
_CHOSEN = "#0b7a4b"


def _sizes(chosen: int, points: int, span: tuple[float, float], floor: int) -> list[int]:
    """About ``points`` distinct whole sizes from span[0]·n to span[1]·n, always including n."""
    lo, hi = max(floor, math.floor(span[0] * chosen)), max(floor + 1, math.ceil(span[1] * chosen))
    step = (hi - lo) / max(points - 1, 1)
    sizes = {int(round(lo + i * step)) for i in range(points)} | {chosen}
    return sorted(n for n in sizes if n >= floor)


def _per_group_for(record: dict, m: int) -> list[int]:
    """Group sizes when the first group has ``m``, keeping the record's group proportions."""
    sizes = record["sample_size"]["per_group"]
    first = sizes[0]
    return [m] + [max(1, math.ceil(m * n / first - 1e-9)) for n in sizes[1:]]


def _power_question(record: dict) -> dict:
    """The record's question as find = power with the effect filled in (also for find = effect)."""
    q = copy.deepcopy(record["question"])
    if q["find"] == "effect" and record.get("effect"):
        q["effect"][record["effect"]["field"]] = record["effect"]["value"]
    q.update(find="power", target_power=None)
    return q


def curve_points(
    record: dict,
    *,
    points: int = DEFAULT_POINTS,
    span: tuple[float, float] = DEFAULT_SPAN,
    replicates: int | None = None,
) -> dict:
    """Return the power curve around the record's answer as plain data (no drawing).

    The x axis is the enrolled n of the first (control) group; other groups follow the record's
    proportions, and dropout and design effect are removed as in the record. Analytic records
    get the formula curve; simulated records get simulated points with Monte Carlo 95% intervals
    (same seed, ``replicates`` each, default min(record's, 1000)) and, for the default normal
    data model, the formula curve beside them.
    """
    if not isinstance(points, int) or isinstance(points, bool) or not 3 <= points <= 40:
        raise QuestionError("points", f"must be a whole number in 3…40; got {points!r}")
    if not (isinstance(span, (tuple, list)) and len(span) == 2 and 0 < span[0] < 1 < span[1] <= 4):
        raise QuestionError(
            "span", f"must be (low, high) with 0 < low < 1 < high ≤ 4; got {span!r}"
        )
    chosen = int(record["sample_size"]["per_group"][0])
    sizes = _sizes(chosen, points, tuple(span), _MIN_N)
    if record.get("precision") is not None:
        return _precision_points(record, sizes, chosen)
    if describe.cell(record["question"]).operating_curve is not None:
        return _operating_points(record)
    q = _power_question(record)
    simulated = q.get("method") == "simulation"

    analytic_q = None
    if not simulated:
        analytic_q = q
    elif (q.get("simulation") or {}).get("data") is None:
        # The formula describes the same (normal / default) data model the simulation drew from.
        analytic_q = dict(copy.deepcopy(q), method="analytic", simulation=None)

    analytic = []
    if analytic_q is not None:
        for m in sizes:
            analytic.append(_power_at(analytic_q, _per_group_for(record, m)))
        if all(p is None for p in analytic):
            analytic = []

    sim_points = []
    reps = None
    if simulated:
        sim = q["simulation"]
        reps = int(replicates or min(int(sim["replicates"]), CURVE_REPLICATES))
        sim_q = copy.deepcopy(q)
        sim_q["simulation"] = dict(sim, replicates=reps)
        for m in sizes:
            est = _simulated_at(sim_q, _per_group_for(record, m))
            if est is not None:
                sim_points.append({"n": m, **est})

    target = record["question"].get("target_power")
    x_label = "Enrolled per group" if len(record["sample_size"]["per_group"]) > 1 else "Enrolled"
    return {
        "title": _curve_title(record, x_label),
        "assumptions": _curve_assumptions(record),
        "method": "simulation" if simulated else "analytic",
        "x_label": x_label,
        "n": sizes,
        "analytic": analytic,
        "simulated": sim_points,
        "replicates": reps,
        "seed": (q.get("simulation") or {}).get("seed"),
        "target_power": target,
        "chosen": {"n": chosen, "power": record["power"]["estimate"]},
    }


def _precision_points(record: dict, sizes: list[int], chosen: int) -> dict:
    """A precision question's curve: the expected half-width against the enrolled size."""
    q = copy.deepcopy(record["question"])
    q["find"] = "precision"
    q["hypothesis"] = dict(q["hypothesis"], half_width=None)
    values = []
    several: dict[str, list] = {  # a cell with several intervals: one line each
        i["estimand"]: [] for i in record["precision"].get("intervals") or []
    }
    for m in sizes:
        try:
            block = compute(dict(q, sample_size={"per_group": _per_group_for(record, m)}))
            values.append(block["precision"]["half_width_expected"])
            widths = {
                i["estimand"]: i["half_width_expected"]
                for i in block["precision"].get("intervals") or []
            }
        except QuestionError:
            values.append(None)
            widths = {}
        for name, line in several.items():
            line.append(widths.get(name))
    x_label = "Enrolled per group" if len(record["sample_size"]["per_group"]) > 1 else "Enrolled"
    target = record["precision"]["half_width_target"]
    lines = [
        f"{describe.cell_label(q)}; {describe.analysis_label(q, record)} (analytic); "
        f"confidence {describe.fmt_pct(q['hypothesis']['confidence'])}, two-sided",
    ]
    dropout = (q.get("adjustments") or {}).get("dropout")
    if dropout:
        lines.append(f"Adjusted for dropout {describe.fmt_pct(dropout)}")
    which = "Half-width of the interval"
    if several:
        which = "Half-width of each interval"  # the legend names them
    return {
        "kind": "precision",
        "title": f"{which} against {x_label.lower()}, with the "
        + ("chosen" if q.get("sample_size") is None else "stated")
        + " size marked",
        "assumptions": lines,
        "method": "analytic",
        "x_label": x_label,
        "n": sizes,
        "analytic": values if any(v is not None for v in values) else [],
        "intervals": [{"estimand": name, "half_widths": line} for name, line in several.items()],
        "simulated": [],
        "replicates": None,
        "seed": None,
        "target_power": None,
        "target_half_width": target,
        "chosen": {"n": chosen, "half_width": record["precision"]["half_width_expected"]},
    }


def _operating_points(record: dict) -> dict:
    """A design whose size its own rules fix: its exact power against the true rate
    (``Design.operating_curve``), not against other sizes."""
    q = record["question"]
    oc = describe.cell(q).operating_curve(record)
    lines = _curve_assumptions(record)
    lines[0] = (
        f"{describe.cell_label(q)}; {describe.analysis_label(q, record)} ; "
        f"alpha {describe.fmt_num(q['alpha'])}, {q.get('alternative', 'two-sided')}"
    )
    return {
        "kind": "operating",
        "title": oc["title"],
        "assumptions": lines,
        "method": "analytic",
        "x_label": oc["x_label"],
        "y_label": oc["y_label"],
        "x": oc["x"],
        "analytic": oc["power"],
        "marks": oc["marks"],
        "caption": oc["caption"],
        "simulated": [],
        "replicates": None,
        "seed": None,
        "target_power": q.get("target_power"),
    }


def _curve_title(record: dict, x_label: str) -> str:
    """Say what the marked size is: chosen (find = sample size) or stated (power, effect)."""
    q = record["question"]
    if q["find"] == "sample_size":
        return f"Power against {x_label.lower()}, with the chosen size marked"
    if q["find"] == "effect" and record.get("effect"):
        label = describe.field_label(q, record["effect"]["field"])
        return (
            f"Power at the smallest detectable {label} against {x_label.lower()}, with the "
            "stated size marked"
        )
    return f"Power against {x_label.lower()}, with the stated size marked"


def _curve_assumptions(record: dict) -> list[str]:
    """The lines under the title: design and analysis, the test's level, the assumed values."""
    q = record["question"]
    alternative = "" if describe.is_omnibus(q) else f", {q.get('alternative', 'two-sided')}"
    how = "Monte Carlo simulation" if q.get("method") == "simulation" else "analytic"
    lines = [
        f"{describe.cell_label(q)}; {describe.analysis_label(q, record)} ({how}); "
        f"alpha {describe.fmt_num(q['alpha'])}{alternative}",
        f"Assuming {describe.assumed_text(_power_question(record), record)}",
    ]
    adjustments = []
    adj = q.get("adjustments") or {}
    if adj.get("dropout"):
        adjustments.append(f"dropout {describe.fmt_pct(adj['dropout'])}")
    if adj.get("cluster"):
        adjustments.append(f"clustering (ICC {describe.fmt_num(adj['cluster']['icc'])})")
    if (adj.get("comparisons") or 1) > 1:
        adjustments.append(f"Bonferroni over {adj['comparisons']} comparisons")
    if adjustments:
        lines.append("Adjusted for " + ", ".join(adjustments))
    return lines


def _power_at(q: dict, per_group: list[int]) -> float | None:
    q = dict(q, sample_size={"per_group": per_group})
    try:
        return compute(q)["power"]["estimate"]
    except QuestionError:
        return None  # a size the design cannot take (e.g. too few for its df) is left out


def _simulated_at(q: dict, per_group: list[int]) -> dict | None:
    q = dict(q, sample_size={"per_group": per_group})
    try:
        power = compute(q)["power"]
    except QuestionError:
        return None
    return {"power": power["estimate"], "mcse": power["mcse"], "ci95": list(power["ci95"])}


# --- drawing ------------------------------------------------------------------------------


def _axes(points: dict, gid: str) -> tuple[Figure, object]:
    """A figure and its axes with the curve's title and the assumptions it was drawn under
    (they travel with the drawing: a saved PNG stands alone)."""
    fig = Figure(figsize=(7.2, 4.8), dpi=100, layout="constrained")
    ax = fig.add_subplot()
    ax.set_gid(gid)
    fig.suptitle(points["title"], color=_INK, fontsize=11).set_gid("curve-heading")
    notes = "\n".join(textwrap.fill(line, 105) for line in points["assumptions"])
    ax.set_title(notes, loc="left", color=_INK, fontsize=7.5).set_gid("curve-assumptions")
    return fig, ax


def _finish(ax, x_label: str, y_label: str, *, power: bool, legend: str | None) -> None:
    """Axis labels, a 0–100% axis for a power, the grid, open top and right, the legend."""
    ax.set_xlabel(x_label, color=_INK)
    ax.set_ylabel(y_label, color=_INK)
    if power:
        ax.set_ylim(0, 1.02)
        ax.yaxis.set_major_formatter(PercentFormatter(xmax=1, decimals=0))  # power in percent
    ax.grid(True, color="#d5dbe1", lw=0.6)
    ax.tick_params(colors=_INK)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    if legend is not None:
        ax.legend(loc=legend, frameon=False, fontsize=9)


def _precision_figure(points: dict) -> Figure:
    """The expected half-width against n, the target as a dashed line, the answer marked."""
    fig, ax = _axes(points, "precision-curve-axes")
    lines = [
        (f"{i['estimand']} interval", i["half_widths"]) for i in points.get("intervals") or []
    ] or [("formula", points["analytic"])]
    for k, (label, ys) in enumerate(lines):
        pairs = [(n, h) for n, h in zip(points["n"], ys, strict=False) if h is not None]
        if pairs:
            color = _LINE_COLORS[k % len(_LINE_COLORS)]
            (line,) = ax.plot(*zip(*pairs, strict=True), color=color, lw=2, label=label)
            line.set_gid("analytic-curve" if k == 0 else f"analytic-curve-{k}")
    target = points.get("target_half_width")
    if target is not None:
        t = ax.axhline(
            target,
            color=_TARGET,
            ls="--",
            lw=1.2,
            label=f"target half-width {describe.fmt_num(target)}",
        )
        t.set_gid("target-line")
    chosen = points["chosen"]
    ax.axvline(chosen["n"], color=_CHOSEN, ls=":", lw=1.5).set_gid("chosen-n")
    (dot,) = ax.plot(
        [chosen["n"]],
        [chosen["half_width"]],
        marker="D",
        ms=7,
        color=_CHOSEN,
        ls="none",
        label=f"answer: {chosen['n']:,} ("
        + ("wider half-width" if points.get("intervals") else "half-width")
        + f" {describe.fmt_num(chosen['half_width'])})",
    )
    dot.set_gid("chosen-point")
    _finish(ax, points["x_label"], "Half-width", power=False, legend="upper right")
    return fig


def _operating_figure(points: dict) -> Figure:
    """Power against the true rate for one fixed design, its two planning rates marked."""
    fig, ax = _axes(points, "power-curve-axes")
    (line,) = ax.plot(points["x"], points["analytic"], color=_ANALYTIC, lw=2, label="exact")
    line.set_gid("analytic-curve")
    target = points.get("target_power")
    if target is not None:
        t = ax.axhline(
            target, color=_TARGET, ls="--", lw=1.2, label=f"target power {describe.fmt_pct(target)}"
        )
        t.set_gid("target-line")
    for k, (mark, marker) in enumerate(zip(points["marks"], ("o", "D"), strict=False)):
        ax.axvline(mark["x"], color=_CHOSEN, ls=":", lw=1.2).set_gid(f"rate-line-{k}")
        (dot,) = ax.plot(
            [mark["x"]],
            [mark["power"]],
            marker=marker,
            ms=7,
            color=_CHOSEN,
            ls="none",
            label=mark["label"],
        )
        dot.set_gid(f"rate-point-{k}")
    _finish(ax, points["x_label"], points["y_label"], power=True, legend="lower right")
    return fig


def _figure(points: dict) -> Figure:
    if points.get("kind") == "precision":
        return _precision_figure(points)
    if points.get("kind") == "operating":
        return _operating_figure(points)
    fig, ax = _axes(points, "power-curve-axes")
    if points["analytic"]:
        pairs = [
            (n, p) for n, p in zip(points["n"], points["analytic"], strict=True) if p is not None
        ]
        label = "formula" if points["method"] == "analytic" else "formula (normal data)"
        (line,) = ax.plot(*zip(*pairs, strict=True), color=_ANALYTIC, lw=2, label=label)
        line.set_gid("analytic-curve")
    if points["simulated"]:
        xs = [p["n"] for p in points["simulated"]]
        ys = [p["power"] for p in points["simulated"]]
        lo = [p["power"] - p["ci95"][0] for p in points["simulated"]]
        hi = [p["ci95"][1] - p["power"] for p in points["simulated"]]
        bars = ax.errorbar(
            xs,
            ys,
            yerr=[lo, hi],
            fmt="o",
            ms=4,
            color=_SIMULATED,
            capsize=3,
            lw=1.2,
            label=f"simulated, 95% Monte Carlo interval ({points['replicates']:,} each)",
        )
        bars.lines[0].set_gid("simulated-points")
        for i, col in enumerate(bars.lines[2]):
            col.set_gid(f"simulated-ci-{i}")
    target = points.get("target_power")
    if target is not None:
        t = ax.axhline(
            target, color=_TARGET, ls="--", lw=1.2, label=f"target power {describe.fmt_pct(target)}"
        )
        t.set_gid("target-line")
    chosen = points["chosen"]
    v = ax.axvline(chosen["n"], color=_CHOSEN, ls=":", lw=1.5)
    v.set_gid("chosen-n")
    (dot,) = ax.plot(
        [chosen["n"]],
        [chosen["power"]],
        marker="D",
        ms=7,
        color=_CHOSEN,
        ls="none",
        label=f"answer: {chosen['n']:,} (power {describe.fmt_power(chosen['power'])})",
    )
    dot.set_gid("chosen-point")
    _finish(ax, points["x_label"], "Power", power=True, legend="lower right")
    return fig


def _svg(fig: Figure, title_id: str, title: str) -> str:
    """The figure as an inline SVG string with an accessible title (no XML prolog)."""
    buf = io.StringIO()
    # A fixed hash salt and no date keep the SVG identical for identical data.
    with matplotlib.rc_context({"svg.hashsalt": "sizewise", "svg.fonttype": "none"}):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    text = buf.getvalue()
    start = text.find("<svg")
    svg = text[start:]
    # Scale with its container instead of a fixed point size.
    svg = re.sub(r'<svg([^>]*?) width="[^"]*" height="[^"]*"', r"<svg\1", svg, count=1)
    svg = svg.replace("<svg ", f'<svg role="img" aria-labelledby="{title_id}" ', 1)
    end = svg.index(">") + 1
    return f'{svg[:end]}<title id="{title_id}">{title}</title>{svg[end:]}'


def power_curve_svg(points: dict) -> str:
    """Draw the curve data as an SVG document string ready to inline in HTML (no XML prolog)."""
    return _svg(_figure(points), "curve-title", points["title"])


# --- the sensitivity grid as curves -----------------------------------------------------------

_LINE_COLORS = ("#1f5fa8", "#b34700", "#0b7a4b", "#7a3fa0", "#a8891f", "#1f8fa8", "#a81f4f")


def sensitivity_lines(grid_result: dict, question: dict | None = None) -> dict:
    """Return a sensitivity grid as lines: x = the first axis, one line per other-axis combination.

    The y value is the enrolled n of the first group for find = sample_size and the power for
    find = power; cells the engine refused are gaps (None). ``question`` (the record's) names
    the axes with its cell's field labels.
    """

    def _path_words(path: str) -> str:
        return describe.path_label(question, path)

    axes = grid_result["axes"]
    if not axes:
        raise ValueError("grid_result.axes: a sensitivity grid has at least one axis")
    first, rest = axes[0], axes[1:]
    y_power = grid_result["find"] == "power"
    lines: dict[tuple, dict] = {}
    for cell in grid_result["cells"]:
        key = tuple(cell["values"][a["path"]] for a in rest)
        if key not in lines:
            label = ", ".join(
                f"{_path_words(a['path'])} {v:g}" for a, v in zip(rest, key, strict=True)
            )
            lines[key] = {"label": label or "as asked", "x": [], "y": []}
        y = None
        if not cell.get("error"):
            y = cell["power"] if y_power else (cell["per_group"] or [None])[0]
        lines[key]["x"].append(cell["values"][first["path"]])
        lines[key]["y"].append(y)
    several = len(grid_result["base"]["per_group"] or []) > 1
    return {
        "x_label": _path_words(first["path"]).capitalize(),
        "y_label": "Power" if y_power else ("Enrolled per group" if several else "Enrolled"),
        "lines": list(lines.values()),
    }


def sensitivity_svg(grid_result: dict, question: dict | None = None) -> str:
    """Draw a sensitivity grid (``explore.sensitivity``'s result) as an inline SVG string."""
    data = sensitivity_lines(grid_result, question)
    fig = Figure(figsize=(7.2, 4.0), dpi=100, layout="constrained")
    ax = fig.add_subplot()
    ax.set_gid("sensitivity-axes")
    for i, line in enumerate(data["lines"]):
        color = _LINE_COLORS[i % len(_LINE_COLORS)]
        ys = [float("nan") if y is None else y for y in line["y"]]
        (drawn,) = ax.plot(
            line["x"], ys, marker="o", ms=4, lw=1.8, color=color, label=line["label"]
        )
        drawn.set_gid(f"sensitivity-line-{i}")
    several = len(data["lines"]) > 1 or data["lines"][0]["label"] != "as asked"
    _finish(
        ax,
        data["x_label"],
        data["y_label"],
        power=data["y_label"] == "Power",
        legend="best" if several else None,
    )
    title = f"{data['y_label']} against {data['x_label'].lower()}, one line per assumption set"
    return _svg(fig, "sensitivity-title", title)


def power_curve_png(points: dict) -> bytes:
    """Draw the curve data as PNG bytes."""
    buf = io.BytesIO()
    _figure(points).savefig(buf, format="png", dpi=150, metadata={"Software": None})
    return buf.getvalue()
