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

from service.engine import CAUTIONS, DESIGN_NAMES

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
    "cancelled": "Cancelled",
}

_FIELD_LABELS = {
    "alpha": "Significance level",
    "target_power": "Target power",
    "allocation_ratio": "Allocation ratio",
    "effect.difference": "Difference",
    "effect.sd": "SD (both groups)",
    "effect.sd_control": "SD, control",
    "effect.sd_treatment": "SD, treatment",
    "effect.sd_difference": "SD of differences",
    "effect.p_control": "Proportion, control",
    "effect.p_treatment": "Proportion, treatment",
    "effect.hazard_ratio": "Hazard ratio",
    "effect.hazard_control": "Control hazard",
    "effect.cohens_f": "Effect size f",
    "effect.r": "Correlation",
    "effect.prob_superiority": "P(treatment > control)",
    "adjustments.dropout": "Dropout",
    "adjustments.cluster.icc": "ICC",
    "adjustments.cluster.mean_size": "Cluster size",
    "adjustments.cluster.cv": "Cluster-size CV",
    "adjustments.cluster.clusters_per_arm": "Clusters per arm",
    "adjustments.comparisons": "Comparisons",
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
}


def _sizes_text(per_arm) -> str:
    # Power questions deflate enrolled numbers to fractional effective sizes; show one decimal.
    if all(float(x).is_integer() for x in per_arm):
        return _per_arm_text([int(x) for x in per_arm])
    return " / ".join(f"{x:.1f}" for x in dict.fromkeys(per_arm))


def _test_name(test: str) -> str:
    name = words.TEST_NAMES.get(test, test)
    return name[4:5].upper() + name[5:] if name.startswith("the ") else name


def _per_arm_text(per_arm) -> str:
    if not per_arm:
        return "—"
    if len(set(per_arm)) == 1:
        return words.fmt_count(per_arm[0])
    return " / ".join(words.fmt_count(n) for n in per_arm)


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
        per_arm=_per_arm_text,
        field_label=lambda path: _FIELD_LABELS.get(path, path),
        departure_label=lambda name: _DEPARTURE_LABELS.get(name, name.replace("_", " ")),
        test_name=_test_name,
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


def question_rows(q: dict) -> list[tuple[str, str]]:
    """Return the normalized question as (label, plain-English value) rows."""
    design = q["design"]
    rows = [
        ("Design", words.DESIGN_PHRASES.get(design, design).capitalize()),
        ("Looking for", _FIND.get(q["find"], q["find"]).capitalize()),
    ]
    sides = (
        ""
        if design == "anova_oneway"
        else ("one-sided" if int(q.get("sides", 2)) == 1 else "two-sided")
    )
    rows.append(("Significance level", f"{words.fmt_num(q['alpha'])} {sides}".strip()))
    if q.get("target_power") is not None:
        rows.append(("Target power", words.fmt_pct(q["target_power"])))
    if q.get("sample_size"):
        rows.append(
            (
                "Enrolled per group" if len(q["sample_size"]["per_arm"]) > 1 else "Enrolled",
                _per_arm_text(q["sample_size"]["per_arm"]),
            )
        )
    rows.append(("Assumed effect", words._effect(q)))
    hyp = q.get("hypothesis") or {}
    if hyp.get("kind", "superiority") != "superiority":
        rows.append(
            (
                "Hypothesis",
                words._hypothesis(q).removeprefix("to ").capitalize()
                + (
                    " (higher is better)"
                    if hyp.get("higher_is_better", True)
                    else " (lower is better)"
                ),
            )
        )
    if design in ("two_means", "two_proportions", "rank_sum", "survival_logrank"):
        rows.append(
            (
                "Allocation",
                f"{words.fmt_num(q.get('allocation_ratio') or 1.0)} : 1 (treatment : control)",
            )
        )
    adj = q.get("adjustments") or {}
    parts = []
    if adj.get("comparisons", 1) > 1:
        parts.append(f"Bonferroni over {adj['comparisons']} comparisons")
    if adj.get("cluster"):
        c = adj["cluster"]
        size = (
            f"clusters of mean size {words.fmt_num(c['mean_size'])}"
            if c.get("mean_size") is not None
            else f"{words.fmt_count(c['clusters_per_arm'])} clusters per group (size solved)"
        )
        parts.append(f"{size}, ICC {words.fmt_num(c['icc'])}")
        if c.get("cv"):
            parts.append(f"cluster-size CV {words.fmt_num(c['cv'])}")
    if adj.get("dropout"):
        parts.append(f"dropout {words.fmt_pct(adj['dropout'])}")
    rows.append(("Adjustments", "; ".join(parts) if parts else "none"))
    if q.get("method") == "simulation":
        sim = q["simulation"]
        rows.append(
            (
                "Method",
                f"Monte Carlo simulation of {words.TEST_NAMES.get(sim['test'], sim['test'])}, "
                f"{words.fmt_count(sim['replicates'])} replicates, seed {sim['seed']}",
            )
        )
    else:
        rows.append(("Method", f"analytic ({q.get('formula') or 'default formula'})"))
    return rows


def _answer_figures(record: dict) -> list[dict]:
    q, size, power = record["question"], record["sample_size"], record["power"]
    figures = []
    several = len(size["per_arm"]) > 1
    if several:
        figures.append(
            {
                "value": _per_arm_text(size["per_arm"]),
                "label": "enrolled per group"
                if len(set(size["per_arm"])) == 1
                else "enrolled per group (" + " / ".join(_arm_names(q, len(size["per_arm"]))) + ")",
            }
        )
    figures.append({"value": words.fmt_count(size["total"]), "label": "enrolled in total"})
    if record.get("events"):
        figures.append(
            {
                "value": words.fmt_count(record["events"]["events"]["required"]),
                "label": "events required",
            }
        )
    if q["find"] == "effect" and record.get("effect"):
        figures.append(
            {
                "value": words.fmt_num(record["effect"]["value"]),
                "label": f"detectable {record['effect']['field'].replace('_', ' ')}",
            }
        )
    label = (
        "power"
        if power.get("mcse") is None
        else (f"simulated power (MCSE {words.fmt_prob(power['mcse'], 4)})")
    )
    figures.append({"value": words.fmt_prob(power["estimate"]), "label": label})
    if size.get("clusters_per_arm"):
        figures.append(
            {"value": _per_arm_text(size["clusters_per_arm"]), "label": "whole clusters per group"}
        )
        figures.append(
            {"value": words.fmt_num(size["mean_cluster_size"]), "label": "people per cluster"}
        )
    return figures


def _arm_names(q: dict, k: int) -> list[str]:
    if q["design"] == "anova_oneway":
        return [f"group {i + 1}" for i in range(k)]
    return ["control", "treatment"][:k]


def _steps_caption(record: dict) -> str:
    """Say what the step table rounded: only a sample-size answer rounds its steps."""
    if record["question"]["find"] == "sample_size":
        base = next((s for s in record["sample_size"]["steps"] if s["step"] == "base"), {})
        if base.get("rounding") == "exact_ratio":
            return (
                "Each step starts from the row above; every step rounds up to whole subjects "
                "keeping the allocation ratio exact."
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
    simulated = record["method"].get("kind") == "simulation"
    return (
        "Each step starts from the enrolled numbers in the row above; the numbers analysed are "
        "not rounded"
        + (
            " (the simulation ran at the whole numbers at or below them)."
            if simulated
            else " (the power formula uses them as they are)."
        )
    )


def _step_rows(record: dict) -> list[dict]:
    rows = []
    for s in record["sample_size"]["steps"]:
        kind = s["step"]
        if kind == "bonferroni":
            rows.append(
                {
                    "name": "Multiple comparisons",
                    "base": False,
                    "detail": f"Bonferroni: alpha {words.fmt_num(s['alpha'])} ÷ {s['comparisons']} = "
                    f"{words.fmt_num(s['alpha_per_comparison'])} per comparison",
                    "result": "—",
                }
            )
        elif kind == "base":
            raw = ", ".join(f"{x:.2f}" for x in dict.fromkeys(s["per_arm_raw"]))
            rounded = (
                "rounded up keeping the allocation ratio exact"
                if s.get("rounding") == "exact_ratio"
                else "rounded up"
            )
            detail = (
                f"solved by the formula: {raw}, {rounded}"
                if record["method"].get("kind") == "analytic"
                else "smallest simulated size reaching the target"
            )
            if record.get("events"):
                ev = record["events"]
                detail += (
                    f"; {words.fmt_count(ev['events']['required'])} events ÷ mean P(event) "
                    f"{words.fmt_prob(ev['p_event']['mean'])}"
                )
            rows.append(
                {
                    "name": "Base size",
                    "base": True,
                    "detail": detail,
                    "result": _per_arm_text(s["per_arm"]),
                }
            )
        elif "unit" in s and (kind != "enrolled" or "clusters_per_arm" in s):
            rows.append(_cluster_row(s))  # cluster-randomized: each step says its unit
        elif kind == "design_effect":
            clusters = _per_arm_text(s.get("clusters_per_arm"))
            rows.append(
                {
                    "name": "Design effect",
                    "base": False,
                    "detail": f"1 + ({words.fmt_num(s['mean_cluster_size'])} − 1) × "
                    f"{words.fmt_num(s['icc'])} = {words.fmt_num(s['factor'])}; "
                    f"{clusters} clusters per group",
                    "result": _sizes_text(s["per_arm"]),
                }
            )
        elif kind == "dropout":
            verb = "divide" if record["question"]["find"] == "sample_size" else "multiply"
            rows.append(
                {
                    "name": "Dropout",
                    "base": False,
                    "detail": f"{words.fmt_pct(s['rate'])}: {verb} by 1 − {words.fmt_num(s['rate'])}",
                    "result": _sizes_text(s["per_arm"]),
                }
            )
        elif kind == "enrolled":
            rows.append(
                {
                    "name": "Enrolled",
                    "base": True,
                    "detail": "as stated in the question",
                    "result": _per_arm_text(s["per_arm"]),
                }
            )
        else:
            rows.append(
                {
                    "name": kind.replace("_", " ").capitalize(),
                    "base": False,
                    "detail": "",
                    "result": _per_arm_text(s.get("per_arm")),
                }
            )
    return rows


def _de_text(s: dict) -> str:
    m = words.fmt_num(s.get("analysed_cluster_size", s["mean_cluster_size"]))
    cv = f"({words.fmt_num(s['cv'])}² + 1) × " if s.get("cv") else ""
    return f"1 + ({cv}{m} − 1) × {words.fmt_num(s['icc'])} = {words.fmt_num(s['factor'])}"


def _cluster_row(s: dict) -> dict:
    """A step of a cluster-randomized record, its unit said in the result."""
    kind = s["step"]
    if kind == "design_effect":
        if "per_arm_raw" in s:  # solving: individuals by the normal approximation
            detail = (
                f"{_de_text(s)}; individuals needed by the normal approximation, "
                f"{_per_arm_text(s['clusters_per_arm'])} clusters of "
                f"{words.fmt_num(s['analysed_cluster_size'])} analysed per group"
            )
            return {
                "name": "Design effect",
                "base": False,
                "detail": detail,
                "result": _sizes_text(s["per_arm_raw"]) + " individuals",
            }
        return {
            "name": "Design effect",
            "base": False,
            "detail": f"{_de_text(s)}; effective individuals = clusters × "
            f"{words.fmt_num(s['analysed_cluster_size'])} ÷ design effect",
            "result": _sizes_text(s["per_arm"]) + " effective individuals",
        }
    if kind == "cluster_df":
        return {
            "name": "Cluster-level test",
            "base": False,
            "detail": f"t test on cluster summaries, {s['df']} df (clusters − 2); "
            f"power {words.fmt_prob(s['power'])}",
            "result": _per_arm_text(s["clusters_per_arm"]) + " clusters",
        }
    if kind == "simulation":
        return {
            "name": "Simulation",
            "base": False,
            "detail": f"smallest simulated number of clusters reaching the target; "
            f"power {words.fmt_prob(s['power'])}",
            "result": _per_arm_text(s["clusters_per_arm"]) + " clusters",
        }
    if kind == "cluster_size":
        return {
            "name": "Cluster size",
            "base": False,
            "detail": f"{_per_arm_text(s['clusters_per_arm'])} clusters fixed; {_de_text(s)}; "
            f"{s['df']} df; power {words.fmt_prob(s['power'])}",
            "result": f"{words.fmt_num(s['mean_cluster_size'])} people per cluster",
        }
    if kind == "clusters":
        return {
            "name": "Clusters",
            "base": False,
            "detail": f"enrolled ÷ mean cluster size {words.fmt_num(s['mean_cluster_size'])}; "
            f"{s['df']} df",
            "result": _per_arm_text(s["clusters_per_arm"]) + " clusters",
        }
    if kind == "dropout":
        return {
            "name": "Dropout",
            "base": False,
            "detail": f"{words.fmt_pct(s['rate'])} of each cluster lost",
            "result": f"{words.fmt_num(s['analysed_cluster_size'])} analysed per cluster",
        }
    return {  # enrolled
        "name": "Enrolled",
        "base": True,
        "detail": f"{_per_arm_text(s['clusters_per_arm'])} whole clusters × "
        f"{words.fmt_num(s['mean_cluster_size'])} people",
        "result": _per_arm_text(s["per_arm"]) + " people",
    }


def _method_text(record: dict) -> str:
    m = record.get("method") or {}
    if m.get("kind") == "analytic":
        return f"{m.get('formula', '')} — {m.get('reference', '')}".strip(" —")
    return m.get("description") or "Monte Carlo simulation"


def _robustness_view(panel: dict | None, q: dict) -> dict | None:
    """The robustness panel with each size's verdict against the alpha its test used.

    Panels stored before verdicts were recorded carry only the overall alpha; the level of
    each test is then alpha divided by the Bonferroni comparisons, as the engine split it.
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
    return {**panel, "alpha_per_comparison": level, "departures": departures}


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
    unescaped); ``pending`` lists analyses still queued or running (each with ``kind`` and
    ``status``). The justification's effect source is read from
    ``request["context"]["effect_source"]`` or ``request["effect_source"]`` when present.
    """
    q = record["question"]
    if q.get("design") not in DESIGN_NAMES:
        raise ValueError(f"record.question.design: unknown design {q.get('design')!r}")
    context = dict(request.get("context") or {})
    if request.get("effect_source") and "effect_source" not in context:
        context["effect_source"] = request["effect_source"]
    status = request.get("status") or "computed"
    several = len(record["sample_size"]["per_arm"]) > 1
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
            question_rows=question_rows(q),
            answer_figures=_answer_figures(record),
            per_arm_heading="Per group" if several else "Number",
            step_rows=_step_rows(record),
            steps_caption=_steps_caption(record),
            justification=words.justification(record, context),
            curve_svg=Markup(curve_svg),
            sensitivity=sensitivity,
            sensitivity_svg=Markup(sensitivity_svg) if sensitivity_svg else None,
            robustness=_robustness_view(robustness, q),
            pending=[
                {
                    "kind": a.get("kind", ""),
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
        rows.append(
            {
                "href": report_href.format(id=r.get("id", "")),
                "protocol_title": protocol.get("title") or "Untitled protocol",
                "protocol_id": protocol.get("id") or "",
                "requester": requester.get("name") or "—",
                "department": requester.get("department"),
                "design": (r.get("design") or "").replace("_", " "),
                "method": r.get("method"),
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
