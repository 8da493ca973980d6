"""Server-rendered HTML: the request report and the staff's request list (Jinja2, autoescaped).

The pages are self-contained: the stylesheet is inlined, the curve is inline SVG, and the only
script is the copy button's; nothing is fetched from elsewhere, so they print and archive cleanly.
"""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path

from jinja2 import Environment, FileSystemLoader
from markupsafe import Markup

from service.engine import CAUTIONS

from . import describe, interim
from . import justification as words

__all__ = ["STATUS_LABELS", "question_rows", "render_report", "render_staff_list"]

_HERE = Path(__file__).parent

STATUS_LABELS = {
    "received": "Received",
    "queued": "Queued",
    "running": "Computing",
    "computed": "Computed, awaiting review",
    "approved": "Approved",
    "returned": "Returned to requester",
    "failed": "Failed",
    "cancelled": "Canceled",
}

_DEPARTURE_LABELS = {
    "normal": "Normal (as planned)",
    "heavy_tails": "Heavy tails",
    "skew_lognormal": "Skewed (lognormal)",
    "skew_gamma": "Skewed (gamma)",
    "unequal_variance": "Unequal variance",
    "cauchy": "Cauchy (extreme)",
}

_FIND = {
    "sample_size": "the sample size that reaches the target power",
    "power": "the power of the stated sample size",
    "effect": "the smallest effect the stated sample size detects",
    "precision": "the half-width of the interval the stated sample size gives",
}
_FIND_ESTIMATION = "the sample size that makes the confidence interval narrow enough"
# A cell that estimates several quantities at once (Estimation.interval_words) has one interval
# each: the question asks for every one of them.
_FIND_SEVERAL = {
    "sample_size": "the sample size that makes each confidence interval narrow enough",
    "precision": "the half-width of each interval the stated sample size gives",
}


_METHODS = {"analytic": "analytic", "simulation": "Monte Carlo simulation"}
_EXPLORATIONS = {"sensitivity_grid": "Sensitivity grid", "robustness_panel": "Robustness panel"}


def _sizes_text(sizes) -> str:
    # Power questions deflate enrolled numbers to fractional effective sizes; show one decimal.
    if all(float(x).is_integer() for x in sizes):
        return _per_group_text([int(x) for x in sizes])
    return " / ".join(f"{x:.1f}" for x in dict.fromkeys(sizes))


def _per_group_text(sizes) -> str:
    if not sizes:
        return "—"
    if len(set(sizes)) == 1:
        return words.fmt_count(sizes[0])
    return " / ".join(words.fmt_count(n) for n in sizes)


@lru_cache(maxsize=1)
def _env() -> Environment:
    env = Environment(
        loader=FileSystemLoader(str(_HERE / "templates")),
        autoescape=True,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters.update(
        num=words.fmt_num,
        count=words.fmt_count,
        prob=words.fmt_prob,
        prob4=lambda p: words.fmt_prob(p, 4),
        power=words.fmt_power,
        per_group=_per_group_text,
        departure_label=lambda name: _DEPARTURE_LABELS.get(name, name.replace("_", " ")),
    )
    return env


@lru_cache(maxsize=1)
def _css() -> Markup:
    return Markup((_HERE / "static" / "report.css").read_text(encoding="utf-8"))


def _version(record: dict | None = None) -> str:
    versions = ((record or {}).get("reproducibility") or {}).get("versions") or {}
    if versions.get("sizewise"):
        return versions["sizewise"]
    from service.engine.records import sizewise_version

    return sizewise_version()


def question_rows(q: dict, record: dict | None = None) -> list[tuple[str, str]]:
    """Return the normalized question as (label, plain-English value) rows."""
    cell = describe.cell(q)
    rows = [
        ("Design", describe.cell_label(q)),
        ("Planned analysis", describe.analysis_label(q, record)),
    ]
    hyp = q.get("hypothesis") or {}
    if hyp.get("aim") == "estimation":
        looking = _FIND_ESTIMATION if q["find"] == "sample_size" else _FIND[q["find"]]
        if cell.estimation is not None and cell.estimation.interval_words is not None:
            looking = _FIND_SEVERAL[q["find"]]
        rows.append(("Looking for", looking.capitalize()))
        rows.append(("Interval", words.interval_words(q).removeprefix("a ").capitalize()))
        rows.append(("Estimating", words.estimand_text(q)))
        return rows + _size_rows(q, record)
    looking = _FIND.get(q["find"], q["find"])
    if q["find"] == "power" and cell.phrases.enrolled:
        # the posted size is part of a design (a two-stage design's stage rules), not one number
        looking = "the power of the stated design"
    rows.append(("Looking for", looking.capitalize()))
    alternative = "" if describe.is_omnibus(q) else q.get("alternative", "two-sided")
    rows.append(("Significance level", f"{words.fmt_num(q['alpha'])} {alternative}".strip()))
    if q.get("target_power") is not None:
        rows.append(("Target power", words.fmt_pct(q["target_power"])))
    rows.extend(_enrolled_rows(q))
    if q["find"] == "effect":
        effect = f"solved for: the smallest detectable {describe.field_label(q, cell.solved)}"
    else:
        effect = describe.effect_text(q, record)
    if effect:
        rows.append(("Effect to detect", effect))
    assumptions = describe.assumptions_text(q)
    if assumptions:
        rows.append(("Assumptions", assumptions))
    hyp = q.get("hypothesis") or {}
    if hyp.get("aim", "superiority") != "superiority":
        better = (
            " (higher is better)" if hyp.get("higher_is_better", True) else " (lower is better)"
        )
        rows.append(
            ("Hypothesis", words.hypothesis_words(q).removeprefix("to ").capitalize() + better)
        )
    if describe.group_count(q) == 2:
        rows.append(
            (
                "Allocation",
                f"{words.fmt_num(q.get('allocation_ratio') or 1.0)} : 1 (treatment : control)",
            )
        )
    return rows + _size_rows(q, record, enrolled=False)


def _enrolled_rows(q: dict) -> list[tuple[str, str]]:
    if not q.get("sample_size"):
        return []
    sizes = q["sample_size"].get("per_group") or []
    own = describe.cell(q).phrases.enrolled  # a size that is not simply the number enrolled
    if sizes and own:
        return [(own, _per_group_text(sizes))]
    if sizes:
        return [("Enrolled per group" if len(sizes) > 1 else "Enrolled", _per_group_text(sizes))]
    return [("Enrolled in total", words.fmt_count(q["sample_size"]["total"]))]


def _size_rows(q: dict, record: dict | None, enrolled: bool = True) -> list[tuple[str, str]]:
    """The rows every question ends with: enrolled numbers, allocation, adjustments, method."""
    rows = _enrolled_rows(q) if enrolled else []
    if enrolled and describe.group_count(q) == 2:
        rows.append(
            (
                "Allocation",
                f"{words.fmt_num(q.get('allocation_ratio') or 1.0)} : 1 (treatment : control)",
            )
        )
    rows.append(("Adjustments", _adjustments_text(q)))
    if q.get("method") == "simulation":
        sim = q["simulation"]
        rows.append(
            (
                "Method",
                f"Monte Carlo simulation, {words.fmt_count(sim['replicates'])} replicates, "
                f"seed {sim['seed']}",
            )
        )
    else:
        rows.append(("Method", _analytic_text(record)))
    return rows


def _analytic_text(record: dict | None) -> str:
    """'Analytic (noncentral t, exact)': the record's approximation in its own words."""
    approximation = ((record or {}).get("method") or {}).get("approximation")
    return f"Analytic ({approximation})" if approximation else "Analytic"


def _adjustments_text(q: dict) -> str:
    adj = q.get("adjustments") or {}
    parts = []
    if (adj.get("comparisons") or 1) > 1:
        parts.append(f"Bonferroni over {adj['comparisons']} comparisons")
    if adj.get("cluster"):
        c = adj["cluster"]
        size = (
            f"clusters of mean size {words.fmt_num(c['mean_size'])}"
            if c.get("mean_size") is not None
            else f"{words.fmt_count(c['clusters_per_group'])} clusters per group (size solved)"
        )
        parts.append(f"{size}, ICC {words.fmt_num(c['icc'])}")
        if c.get("cv"):
            parts.append(f"cluster-size CV {words.fmt_num(c['cv'])}")
    if adj.get("dropout"):
        parts.append(f"dropout {words.fmt_pct(adj['dropout'])}")
    return "; ".join(parts) if parts else "none"


def _precision_figures(record: dict) -> list[dict]:
    """The answer's half-widths: expected, assured (with an assurance), and the target's odds."""
    p = record["precision"]
    figures = [
        {"value": words.fmt_num(p["half_width_expected"]), "label": f"half-width {p['basis']}"}
    ]
    if p.get("intervals"):  # several intervals: each one's half-width, and which one is wider
        figures = [
            {
                "value": words.fmt_num(i["half_width_expected"]),
                "label": f"half-width of the {i['estimand']} interval (among the expected "
                f"{words.fmt_num(round(i['expected_subjects'], 1))} {i['subjects']})"
                + (
                    (
                        ", the wider: it sets the sample size"
                        if record["question"]["find"] == "sample_size"
                        else ", the wider"
                    )
                    if i["estimand"] == p["wider"]
                    else ""
                ),
            }
            for i in p["intervals"]
        ]
    if p.get("half_width_assured") is not None:
        figures.append(
            {
                "value": words.fmt_num(p["half_width_assured"]),
                "label": f"half-width not exceeded with probability {words.fmt_pct(p['assurance'])}",
            }
        )
    if p.get("probability") is not None:
        figures.append(
            {
                "value": words.fmt_pct(p["probability"]),
                "label": f"probability the half-width is at most {words.fmt_num(p['half_width_target'])}",
            }
        )
    return figures


def _power_label(power: dict) -> str:
    if power.get("mcse") is None:
        return "power"
    lo, hi = power["ci95"]
    return f"simulated power (95% interval {words.fmt_power(lo)} to {words.fmt_power(hi)})"


def _answer_figures(record: dict) -> list[dict]:
    q, size, power = record["question"], record["sample_size"], record["power"]
    own = words.size_figures(record)
    if own:  # the cell says what its sizes are; a simulated power is shown beside its own
        figures = [{"value": value, "label": label} for value, label in own]
        if power is not None and power.get("mcse") is not None:
            figures.append(
                {"value": words.fmt_power(power["estimate"]), "label": _power_label(power)}
            )
        return figures
    figures = []
    sizes = size["per_group"]
    if len(sizes) > 1:
        names = describe.group_names(q, len(sizes))
        figures.append(
            {
                "value": _per_group_text(sizes),
                "label": "enrolled per group"
                if len(set(sizes)) == 1
                else "enrolled per group (" + " / ".join(names) + ")",
            }
        )
    figures.append({"value": words.fmt_count(size["total"]), "label": "enrolled in total"})
    events = words.events_of(record)
    if events:
        figures.append({"value": words.fmt_count(events["required"]), "label": "events required"})
    if q["find"] == "effect" and record.get("effect"):
        figures.append(
            {
                "value": words.fmt_num(record["effect"]["value"]),
                "label": f"smallest detectable {describe.field_label(q, record['effect']['field'])}",
            }
        )
    if power is None:  # a precision question: the interval's half-width instead
        return figures + _precision_figures(record)
    figures.append({"value": words.fmt_power(power["estimate"]), "label": _power_label(power)})
    if size.get("clusters_per_group"):
        figures.append(
            {
                "value": _per_group_text(size["clusters_per_group"]),
                "label": "whole clusters per group",
            }
        )
        figures.append(
            {"value": words.fmt_num(size["mean_cluster_size"]), "label": "people per cluster"}
        )
    return figures


def _steps(record: dict, several: bool) -> dict:
    """The table after the answer: the cell's own (a two-stage design's stages), else the
    adjustment steps."""
    own = words.size_stages(record)
    if own is not None:
        return own
    return {
        "title": "Adjustment steps",
        "name_heading": "Step",
        "caption": _steps_caption(record),
        "heading": "Per group" if several else "Number",
        "rows": _step_rows(record),
    }


def _steps_caption(record: dict) -> str:
    """Say what the step table rounded: only a sample-size answer rounds its steps."""
    if record["question"]["find"] == "sample_size":
        base = next((s for s in record["sample_size"]["steps"] if s["step"] == "base"), {})
        if base.get("rounding") == "exact_ratio":
            return (
                "Each step starts from the row above; every step rounds up to whole subjects "
                "keeping the allocation ratio exact."
            )
        if describe.size_search(record):
            later = any(s["step"] != "base" for s in record["sample_size"]["steps"])
            return "The base size is a whole number found by exact search" + (
                "; each later step starts from the row above and rounds each group up to whole "
                "subjects."
                if later
                else "."
            )
        if (record["question"].get("adjustments") or {}).get("cluster"):
            return (
                "Each step starts from the row above; the design-effect row shows the unrounded "
                "number of individuals, and the cluster rows round up to whole clusters."
            )
        return (
            "Each step starts from the row above; every step rounds each group up to whole "
            "subjects."
        )
    simulated = record["method"].get("method") == "simulation"
    return (
        "Each step starts from the enrolled numbers in the row above; the numbers analyzed are "
        "not rounded"
        + (
            " (the simulation ran at the whole numbers at or below them)."
            if simulated
            else " (the formula uses them as they are)."
        )
    )


def _step_rows(record: dict) -> list[dict]:
    rows = []
    for s in record["sample_size"]["steps"]:
        which = s["step"]
        if which == "bonferroni":
            rows.append(
                {
                    "name": "Multiple comparisons",
                    "base": False,
                    "detail": f"Bonferroni: alpha {words.fmt_num(s['alpha'])} ÷ {s['comparisons']} = "
                    f"{words.fmt_num(s['alpha_per_comparison'])} per comparison",
                    "result": "—",
                }
            )
        elif which == "interim":
            fixed = ", ".join(f"{x:.2f}" for x in dict.fromkeys(s["fixed_per_group_raw"]))
            rows.append(
                {
                    "name": "Interim analyses",
                    "base": False,
                    "detail": f"a single final analysis needs {fixed}; × inflation factor "
                    f"{s['inflation']:.4f} for the planned interim analyses",
                    "result": ", ".join(f"{x:.2f}" for x in dict.fromkeys(s["per_group_raw"])),
                }
            )
        elif which == "base":
            raw = ", ".join(f"{x:.2f}" for x in dict.fromkeys(s["per_group_raw"]))
            rounded = (
                "rounded up keeping the allocation ratio exact"
                if s.get("rounding") == "exact_ratio"
                else "rounded up"
            )
            detail = (
                f"solved by the formula: {raw}, {rounded}"
                if record["method"].get("method") != "simulation"
                else "smallest simulated size reaching the target"
            )
            searched = describe.size_search(record)
            if searched:
                detail = searched  # whole sizes from the start: nothing was rounded
            events = words.events_of(record)
            if events:
                detail += (
                    f"; {words.fmt_count(events['required'])} events ÷ mean P(event) "
                    f"{words.fmt_prob(events['probability']['mean'])}"
                )
            rows.append(
                {
                    "name": "Base size",
                    "base": True,
                    "detail": detail,
                    "result": _per_group_text(s["per_group"]),
                }
            )
        elif "unit" in s and (which != "enrolled" or "clusters_per_group" in s):
            rows.append(_cluster_row(s))  # cluster-randomized: each step says its unit
        elif which == "design_effect":
            clusters = _per_group_text(s.get("clusters_per_group"))
            rows.append(
                {
                    "name": "Design effect",
                    "base": False,
                    "detail": f"1 + ({words.fmt_num(s['mean_cluster_size'])} − 1) × "
                    f"{words.fmt_num(s['icc'])} = {words.fmt_num(s['factor'])}; "
                    f"{clusters} clusters per group",
                    "result": _sizes_text(s["per_group"]),
                }
            )
        elif which == "dropout":
            verb = "divide" if record["question"]["find"] == "sample_size" else "multiply"
            rows.append(
                {
                    "name": "Dropout",
                    "base": False,
                    "detail": f"{words.fmt_pct(s['rate'])}: {verb} by 1 − {words.fmt_num(s['rate'])}",
                    "result": _sizes_text(s["per_group"]),
                }
            )
        elif which == "enrolled":
            rows.append(
                {
                    "name": "Enrolled",
                    "base": True,
                    "detail": "as stated in the question",
                    "result": _per_group_text(s["per_group"]),
                }
            )
        else:
            rows.append(
                {
                    "name": which.replace("_", " ").capitalize(),
                    "base": False,
                    "detail": "",
                    "result": _per_group_text(s.get("per_group")),
                }
            )
    return rows


def _de_text(s: dict) -> str:
    m = words.fmt_num(s.get("analyzed_cluster_size", s["mean_cluster_size"]))
    cv = f"({words.fmt_num(s['cv'])}² + 1) × " if s.get("cv") else ""
    return f"1 + ({cv}{m} − 1) × {words.fmt_num(s['icc'])} = {words.fmt_num(s['factor'])}"


def _cluster_row(s: dict) -> dict:
    """A step of a cluster-randomized record, its unit said in the result."""
    which = s["step"]
    if which == "design_effect":
        if "per_group_raw" in s:  # solving: individuals by the normal approximation
            detail = (
                f"{_de_text(s)}; individuals needed by the normal approximation, "
                f"{_per_group_text(s['clusters_per_group'])} clusters of "
                f"{words.fmt_num(s['analyzed_cluster_size'])} analyzed per group"
            )
            return {
                "name": "Design effect",
                "base": False,
                "detail": detail,
                "result": _sizes_text(s["per_group_raw"]) + " individuals",
            }
        return {
            "name": "Design effect",
            "base": False,
            "detail": f"{_de_text(s)}; effective individuals = clusters × "
            f"{words.fmt_num(s['analyzed_cluster_size'])} ÷ design effect",
            "result": _sizes_text(s["per_group"]) + " effective individuals",
        }
    if which == "cluster_df":
        return {
            "name": "Cluster-level test",
            "base": False,
            "detail": f"t test on cluster summaries, {s['df']} df (clusters − 2); "
            f"power {words.fmt_power(s['power'])}",
            "result": _per_group_text(s["clusters_per_group"]) + " clusters",
        }
    if which == "simulation":
        return {
            "name": "Simulation",
            "base": False,
            "detail": f"smallest simulated number of clusters reaching the target; "
            f"power {words.fmt_power(s['power'])}",
            "result": _per_group_text(s["clusters_per_group"]) + " clusters",
        }
    if which == "cluster_size":
        return {
            "name": "Cluster size",
            "base": False,
            "detail": f"{_per_group_text(s['clusters_per_group'])} clusters fixed; {_de_text(s)}; "
            f"{s['df']} df; power {words.fmt_power(s['power'])}",
            "result": f"{words.fmt_num(s['mean_cluster_size'])} people per cluster",
        }
    if which == "clusters":
        return {
            "name": "Clusters",
            "base": False,
            "detail": f"enrolled ÷ mean cluster size {words.fmt_num(s['mean_cluster_size'])}; "
            f"{s['df']} df",
            "result": _per_group_text(s["clusters_per_group"]) + " clusters",
        }
    if which == "dropout":
        return {
            "name": "Dropout",
            "base": False,
            "detail": f"{words.fmt_pct(s['rate'])} of each cluster lost",
            "result": f"{words.fmt_num(s['analyzed_cluster_size'])} analyzed per cluster",
        }
    return {  # enrolled
        "name": "Enrolled",
        "base": True,
        "detail": f"{_per_group_text(s['clusters_per_group'])} whole clusters × "
        f"{words.fmt_num(s['mean_cluster_size'])} people",
        "result": _per_group_text(s["per_group"]) + " people",
    }


def _method_text(record: dict) -> str:
    """The reproducibility section's method line: how, which test, derived values."""
    m, q = record.get("method") or {}, record["question"]
    test = describe.analysis_label(q, record)
    if m.get("method") == "simulation":
        text = f"Monte Carlo simulation of {test}"
    else:
        text = f"{_analytic_text(record)}, {test}"
        if m.get("reference"):
            text += f" — {m['reference']}"
    derived = describe.derived_text(q, record)
    return f"{text}. Derived from the entered values: {derived}." if derived else f"{text}."


def _robustness_view(panel: dict | None, q: dict) -> dict | None:
    """The robustness panel with its analysis label and each verdict against the alpha used.

    A panel without a per-comparison alpha is judged at alpha divided by the Bonferroni
    comparisons, as the engine split it.
    """
    if not panel:
        return panel
    level = panel.get("alpha_per_comparison")
    if level is None and panel.get("alpha") is not None:
        k = int(((q.get("adjustments") or {}).get("comparisons")) or 1)
        level = float(panel["alpha"]) / k
    departures = []
    for d in panel.get("departures") or []:
        t1 = d.get("type_i_error")
        if t1 and level is not None:
            verdict = words.size_verdict({**t1, "alpha": t1.get("alpha") or level})
            t1 = {**t1, "verdict": verdict, "label": words.SIZE_LABELS[verdict]}
        departures.append({**d, "type_i_error": t1})
    return {
        **panel,
        "analysis_label": describe.label_of_analysis(q, panel.get("analysis")),
        "alpha_per_comparison": level,
        "departures": departures,
    }


def _grid_column(sensitivity: dict | None, q: dict) -> dict | None:
    """The cell's own grid column (``Phrases.grid_column``): its heading and one text per grid
    cell; None when the cell has none or no grid cell has anything to say in it."""
    phrases = describe.cell(q).phrases
    column = phrases.grid_column if phrases is not None else None
    if not sensitivity or column is None:
        return None
    heading, words = column
    texts = [words(c.get("details")) for c in sensitivity.get("cells") or []]
    return {"heading": heading, "texts": texts} if any(texts) else None


def render_report(
    request: dict,
    record: dict,
    *,
    curve_svg: str,
    sensitivity: dict | None = None,
    robustness: dict | None = None,
    sensitivity_svg: str | None = None,
    pending: list[dict] | None = None,
) -> str:
    """Render the full HTML report of one request and its result record.

    ``curve_svg`` and ``sensitivity_svg`` must come from ``plots`` (they are inlined
    unescaped); ``pending`` lists explorations still queued or running (each with ``type``
    and ``status``). The justification's effect source is read from
    ``request["context"]["effect_source"]`` or ``request["effect_source"]`` when present.
    """
    q = record["question"]
    describe.cell(q)  # an unknown cell is refused here, naming the field
    context = dict(request.get("context") or {})
    if request.get("effect_source") and "effect_source" not in context:
        context["effect_source"] = request["effect_source"]
    status = request.get("status") or "computed"
    several = len(record["sample_size"]["per_group"]) > 1
    # a design whose rules fix its size draws power against the true rate (plots.curve_points)
    operating = describe.cell(q).operating_curve
    curve_caption = operating(record)["caption"] if operating is not None else None
    return (
        _env()
        .get_template("report.html.j2")
        .render(
            css=_css(),
            version=_version(record),
            request=request,
            protocol=request.get("protocol") or {},
            requester=request.get("requester") or {},
            status=status,
            status_label=STATUS_LABELS.get(status, status),
            record=record,
            simulated=(record.get("method") or {}).get("method") == "simulation",
            question_rows=question_rows(q, record),
            answer_figures=_answer_figures(record),
            per_group_heading="Per group" if several else "Number",
            steps=_steps(record, several),
            interim=interim.table(record),
            justification=words.justification(record, context),
            curve_svg=Markup(curve_svg),
            curve_caption=curve_caption,
            sensitivity=sensitivity,
            sensitivity_axes=[
                {"path": a["path"], "label": describe.path_label(q, a["path"]).capitalize()}
                for a in (sensitivity or {}).get("axes") or []
            ],
            sensitivity_column=_grid_column(sensitivity, q),
            sensitivity_svg=Markup(sensitivity_svg) if sensitivity_svg else None,
            robustness=_robustness_view(robustness, q),
            pending=[
                {
                    "label": _EXPLORATIONS.get(a.get("type"), "Exploration"),
                    "status": STATUS_LABELS.get(a.get("status"), a.get("status")),
                }
                for a in pending or []
            ],
            repro=record["reproducibility"],
            method_text=_method_text(record),
            question_json=json.dumps(q, indent=2, sort_keys=True, ensure_ascii=False),
            cautions=record.get("cautions") or list(CAUTIONS),
        )
    )


def _study_words(q: dict | None) -> tuple[str, str]:
    """The staff list's design and analysis cells; dashes when the question names no known cell."""
    if not q:
        return "—", ""
    try:
        return describe.cell_label(q), describe.analysis_label(q)
    except ValueError:
        return "—", ""


def render_staff_list(
    requests: list[dict], *, report_href: str = "/v1/requests/{id}/report"
) -> str:
    """Render the biostatistics core's list of requests with their status."""
    rows = []
    counts: dict[str, int] = {}
    for r in requests:
        status = r.get("status") or "received"
        counts[status] = counts.get(status, 0) + 1
        protocol, requester = r.get("protocol") or {}, r.get("requester") or {}
        progress = r.get("progress")
        cell, analysis = _study_words(r.get("question"))
        rows.append(
            {
                "href": report_href.format(id=r.get("id", "")),
                "protocol_title": protocol.get("title") or "Untitled protocol",
                "protocol_id": protocol.get("id") or "",
                "requester": requester.get("name") or "—",
                "department": requester.get("department"),
                "cell": cell,
                "analysis": analysis,
                "method": _METHODS.get(r.get("method"), ""),
                "status": status,
                "status_label": STATUS_LABELS.get(status, status),
                "progress": None if progress is None else words.fmt_pct(round(float(progress), 2)),
                "deadline": r.get("deadline"),
                "assigned_to": r.get("assigned_to"),
            }
        )
    order = [s for s in STATUS_LABELS if s in counts] + sorted(set(counts) - set(STATUS_LABELS))
    counts_text = (
        (
            f"{len(rows)} request{'s' if len(rows) != 1 else ''}: "
            + ", ".join(f"{counts[s]} {STATUS_LABELS.get(s, s).lower()}" for s in order)
        )
        if rows
        else ""
    )
    return (
        _env()
        .get_template("staff_list.html.j2")
        .render(css=_css(), version=_version(), rows=rows, counts_text=counts_text)
    )
