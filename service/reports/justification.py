"""The sample-size justification: one paragraph of plain scientific English, ready for a protocol.

Every number comes from the result record and is formatted by the helpers in ``describe``, so a
test can find each one and nothing in the text can disagree with the record. Counts use a
thousands separator (``1,016``); powers are percentages with one decimal (``90.3%``) whether
computed or simulated; seeds are printed as digits only so they can be copied exactly. Design
words come from the design object (``describe``): this module never names a design.
"""

from __future__ import annotations

from service.engine import simulate

from . import interim
from .describe import (
    analysis_label,
    analytic_words,
    assumed_text,
    assumptions_text,
    cell,
    cell_label,
    derived_text,
    field_label,
    fmt_count,
    fmt_num,
    fmt_pct,
    fmt_power,
    fmt_prob,
    group_names,
    is_omnibus,
    margin_text,
    size_search,
    unit_words,
)

__all__ = [
    "SIZE_LABELS",
    "SIZE_WORDS",
    "fmt_count",
    "fmt_num",
    "fmt_pct",
    "fmt_power",
    "estimand_text",
    "events_of",
    "interval_words",
    "precision_sentence",
    "fmt_prob",
    "hypothesis_words",
    "justification",
    "method_note",
    "method_sentence",
    "size_verdict",
]

_PARAM = {
    "sd": "SD",
    "mu": "log-scale mean",
    "sigma": "log-scale SD",
    "df": "degrees of freedom",
    "loc": "location",
}


def _raw(x: float) -> str:
    return f"{float(x):.2f}"


# --- sizes ----------------------------------------------------------------------------------


def _per_group(sizes: list, q: dict) -> str:
    """'64 per group', '339 in the control group and 677 in the treatment group', '34 pairs'."""
    one, many = unit_words(q)
    if len(sizes) == 1:
        return f"{fmt_count(sizes[0])} {one if sizes[0] == 1 else many}"
    if len(set(sizes)) == 1:
        return f"{fmt_count(sizes[0])} per group"
    names = group_names(q, len(sizes))
    parts = [f"{fmt_count(n)} in the {name} group" for n, name in zip(sizes, names, strict=True)]
    return ", ".join(parts[:-1]) + " and " + parts[-1]


def _enrolled(sizes: list, total: int, q: dict) -> str:
    """'30 enrolled per group (60 in total)', '20 pairs enrolled'."""
    if len(sizes) == 1:
        return f"{_per_group(sizes, q)} enrolled"
    if len(set(sizes)) == 1:
        return f"{fmt_count(sizes[0])} enrolled per group ({fmt_count(total)} in total)"
    return f"{_per_group(sizes, q)} enrolled ({fmt_count(total)} in total)"


def _analyzed(sizes: list, q: dict) -> str:
    # Effective sizes after dropout or clustering are fractional; one decimal says so honestly.
    if len(sizes) == 1:
        return f"{sizes[0]:.1f} {unit_words(q)[1]}"
    if len(set(sizes)) == 1:
        return f"{sizes[0]:.1f} per group"
    return " and ".join(f"{x:.1f}" for x in sizes) + " in the groups"


# --- the question in words ---------------------------------------------------------------------


def hypothesis_words(q: dict) -> str:
    hyp = q.get("hypothesis") or {}
    aim, margin = hyp.get("aim", "superiority"), hyp.get("margin")
    own = margin_text(q) if aim != "superiority" else None
    if own:
        return own
    if aim == "noninferiority" and q.get("outcome") == "time_to_event":
        return (
            f"to show non-inferiority with a hazard-ratio margin of {fmt_num(margin)} "
            "(treatment over control)"
        )
    if aim == "noninferiority":
        return f"to show non-inferiority with a margin of {fmt_num(margin)}"
    if aim == "equivalence":
        return f"to show equivalence within ±{fmt_num(margin)} by two one-sided tests (TOST)"
    return "to detect"


def _one_sided_words(q: dict) -> str:
    """Which way a one-sided superiority test looked: the normalized question's direction."""
    higher = (q.get("hypothesis") or {}).get("higher_is_better", True)
    if q.get("outcome") == "time_to_event":
        return "longer times to the event" if higher else "shorter times to the event"
    return "a higher value than under the null" if higher else "a lower value than under the null"


def _alpha(q: dict, steps: list[dict]) -> str:
    alternative = "" if is_omnibus(q) else f"{q.get('alternative', 'two-sided')} "
    text = f"a {alternative}significance level of {fmt_num(q['alpha'])}"
    aim = (q.get("hypothesis") or {}).get("aim", "superiority")
    if alternative == "one-sided " and aim == "superiority":
        text += f" (the alternative: {_one_sided_words(q)})"
    for step in steps:
        if step["step"] == "bonferroni":
            text += (
                f", divided by Bonferroni over {fmt_count(step['comparisons'])} comparisons to "
                f"{fmt_num(step['alpha_per_comparison'])} per comparison,"
            )
    return text


def multiplicity_sentence(record: dict) -> str:
    """Holm's or Hochberg's power at the Bonferroni size, '' without the block."""
    block = record.get("multiplicity")
    if not block:
        return ""
    name = {"holm": "Holm's step-down", "hochberg": "Hochberg's step-up"}[block["procedure"]]
    ours, bonf = block["power"], block["bonferroni"]
    together = (
        "independent"
        if not block["correlation"]
        else f"correlated ({fmt_num(block['correlation'])})"
    )
    return (
        f" The {fmt_count(block['comparisons'])} comparisons are tested with {name} procedure, "
        "which rejects whatever Bonferroni's split rejects, so the size planned with that split "
        f"is enough; with {together} comparisons its power is {fmt_power(ours['each']['estimate'])} "
        f"for a given comparison, {fmt_power(ours['any']['estimate'])} for at least one and "
        f"{fmt_power(ours['all']['estimate'])} for all of them (Bonferroni: "
        f"{fmt_power(bonf['each']['estimate'])}, {fmt_power(bonf['any']['estimate'])} and "
        f"{fmt_power(bonf['all']['estimate'])}), simulated with {fmt_count(block['replicates'])} "
        "replicates under the normal approximation."
    )


# --- adjustment chains -------------------------------------------------------------------------


def _steps_sentence(steps: list[dict], total: int, q: dict) -> str:
    """The adjustment chain after the base n, each step with its inputs and its rounded result."""
    if any(step["step"] in ("cluster_df", "cluster_size") for step in steps):
        return _cluster_sentence(steps, total)
    parts = []
    for step in steps:
        if step["step"] == "design_effect":
            clusters = step.get("clusters_per_group")
            text = (
                f"allowing for clustering (mean cluster size {fmt_num(step['mean_cluster_size'])}, "
                f"intracluster correlation {fmt_num(step['icc'])}, design effect "
                f"{fmt_num(step['factor'])}) raises this to {_per_group(step['per_group'], q)}"
            )
            if clusters:
                text += f" ({_clusters(clusters)})"
            parts.append(text)
        elif step["step"] == "dropout":
            parts.append(
                f"allowing for {fmt_pct(step['rate'])} dropout (dividing by 1 − "
                f"{fmt_num(step['rate'])}) gives {_per_group(step['per_group'], q)}"
            )
    if not parts:
        return ""
    text = "; ".join(parts)
    return text[0].upper() + text[1:] + f", so {fmt_count(total)} are to be enrolled in total."


def _cluster_inputs(step: dict, dropout: dict | None) -> str:
    """'mean cluster size 20 (16 analyzed after 20% dropout), …, design effect 1.75'."""
    size = fmt_num(step["mean_cluster_size"])
    if dropout is not None:
        size += (
            f" ({fmt_num(step['analyzed_cluster_size'])} analyzed after "
            f"{fmt_pct(dropout['rate'])} dropout within clusters)"
        )
    text = f"mean cluster size {size}, intracluster correlation {fmt_num(step['icc'])}"
    if step.get("cv"):
        text += f", coefficient of variation of cluster size {fmt_num(step['cv'])}"
    return text + f", design effect {fmt_num(step['factor'])}"


def _individuals(sizes: list) -> str:
    if len(set(sizes)) == 1:
        return f"{_raw(sizes[0])} individuals per group"
    return " and ".join(_raw(x) for x in sizes) + " individuals in the groups"


def _cluster_sentence(steps: list[dict], total: int) -> str:
    """The cluster chain: design effect, cluster-level df, whole clusters × their size."""
    by = {s["step"]: s for s in steps}
    enrolled = by["enrolled"]
    clusters = enrolled["clusters_per_group"]
    parts = []
    if "design_effect" in by:
        de = by["design_effect"]
        parts.append(
            f"Whole clusters are randomized ({_cluster_inputs(de, by.get('dropout'))}); by the "
            f"normal approximation this needs {_individuals(de['per_group_raw'])} "
            f"({_clusters(de['clusters_per_group'])})"
        )
    if "cluster_df" in by:
        df = by["cluster_df"]
        parts.append(
            f"the cluster-level t test with {fmt_count(df['df'])} degrees of freedom (clusters "
            f"− 2) needs {_clusters(df['clusters_per_group'])} (power {fmt_power(df['power'])})"
        )
    if "simulation" in by:
        parts.append(
            f"the simulation settles on {_clusters(by['simulation']['clusters_per_group'])}"
        )
    if "cluster_size" in by:
        cs = by["cluster_size"]
        parts.append(
            f"Whole clusters are randomized with {_clusters(cs['clusters_per_group'])} fixed "
            f"({_cluster_inputs(cs, by.get('dropout'))}); the smallest whole cluster size whose "
            f"cluster-level t test ({fmt_count(cs['df'])} degrees of freedom) reaches the target "
            f"is {fmt_num(cs['mean_cluster_size'])} (power {fmt_power(cs['power'])})"
        )
    people = enrolled["per_group"]
    each = (
        f"{fmt_count(people[0])} people per group"
        if len(set(people)) == 1
        else " and ".join(fmt_count(n) for n in people)
        + " people in the control and treatment groups"
    )
    parts.append(
        f"so whole clusters of {fmt_num(enrolled['mean_cluster_size'])} people are enrolled, "
        f"{_clusters(clusters)} ({each})"
    )
    text = "; ".join(parts)
    return (
        text[0].upper()
        + text[1:]
        + f": {fmt_count(total)} are to be enrolled in total in {fmt_count(sum(clusters))} clusters."
    )


def _clusters(clusters: list) -> str:
    if len(set(clusters)) == 1:
        return f"{fmt_count(clusters[0])} clusters per group"
    return (
        " and ".join(fmt_count(c) for c in clusters)
        + " clusters in the control and treatment groups"
    )


# --- method, source, simulation ----------------------------------------------------------------


def method_sentence(record: dict) -> str:
    """How the answer was computed: the method, its approximation and reference."""
    m = record.get("method") or {}
    if m.get("method") == "simulation":
        return "The calculation used Monte Carlo simulation of the planned analysis."
    how = "; ".join(str(x) for x in (m.get("approximation"), m.get("reference")) if x)
    return "The calculation was analytic" + (f" ({how})." if how else ".")


def method_note(record: dict) -> str:
    """The values the engine derived from the entered ones (``method.derived``), or ''."""
    derived = derived_text(record["question"], record)
    return (
        f"Method note: from the entered values the calculation derived {derived}."
        if derived
        else ""
    )


def _source(context: dict | None) -> str:
    source = (context or {}).get("effect_source")
    if source and str(source).strip():
        return f" The assumed values are based on {str(source).strip().rstrip('.')}."
    return " [State the source of the assumed values: pilot data, literature or clinical judgment.]"


def _dist_words(dist: dict) -> str:
    params = ", ".join(
        f"{_PARAM.get(k, k.replace('_', ' '))} {fmt_num(v)}"
        for k, v in dist.items()
        if k != "family"
    )
    return f"{dist['family'].replace('_', ' ')} ({params})"


def _data_model(data: dict | None) -> str:
    if not data:
        return ""
    described = []
    for label, dist in data.items():
        if isinstance(dist, dict) and "family" in dist:
            described.append(f"{label} {_dist_words(dist)}")
        elif isinstance(dist, list):
            one = "treatment" if label == "treatments" else "group"
            described.extend(f"{one} {i + 1} {_dist_words(d)}" for i, d in enumerate(dist))
    return f" The simulated data were {'; '.join(described)}." if described else ""


def _power_with_interval(power: dict) -> str:
    lo, hi = power["ci95"]
    return (
        f"{fmt_power(power['estimate'])} (Monte Carlo standard error "
        f"{100 * power['mcse']:.1f} percentage points, 95% interval {fmt_power(lo)} to "
        f"{fmt_power(hi)})"
    )


def _simulation(record: dict) -> str:
    """Replicates, seed, Monte Carlo error of the power and the type I error check."""
    repro, power = record["reproducibility"], record["power"]
    q = record["question"]
    sim, search = q["simulation"], record.get("search")
    method = record.get("method") or {}
    text = _data_model(method.get("data"))
    if method.get("implied_effect"):
        text += (
            " The assumed effect stated above is the one this data model implies "
            "(derived from its distributions, not taken from separately posted effect values)."
        )
    what = "effect" if q["find"] == "effect" else "size"
    if search:
        text += (
            f" Candidate {what}s were screened with {fmt_count(search['search_replicates'])} "
            f"replicates each, and the chosen {what} was confirmed"
        )
    else:
        text += " The power was estimated"
    text += (
        f" with {fmt_count(power['replicates'])} replicates (seed {repro['seed']}, "
        f"{repro['bit_generator']} generator): estimated power {_power_with_interval(power)}."
    )
    if search and search.get("settled"):
        text += _settled_words(search["settled"], power["replicates"])
    if sim.get("decision_rule") == "lower_bound" and q["find"] == "sample_size":
        text += " The size was accepted only when the lower 95% bound reached the target power."
    if power.get("analytic") is not None:
        where = "the simulated effect" if what == "effect" else "the same size"
        text += (
            f" The {analytic_words(record)} gives a power of {fmt_power(power['analytic'])} at "
            f"{where}."
        )
    t1 = record.get("type_i_error")
    if t1:
        text += (
            f" Under the null hypothesis ({t1['null_model'].replace('(', '[').replace(')', ']')}) "
            f"the simulated type I error was {fmt_prob(t1['estimate'], 4)} (Monte Carlo standard "
            f"error {fmt_prob(t1['mcse'], 4)}, 95% interval {fmt_prob(t1['ci95'][0], 4)} to "
            f"{fmt_prob(t1['ci95'][1], 4)}) against the nominal {fmt_num(t1['alpha'])}"
        )
        text += SIZE_WORDS[size_verdict(t1)]
    return text


def _settled_words(settled: dict, replicates: int) -> str:
    """Why the n confirmation stopped short of the exact crossing, in the record's numbers."""
    below = settled.get("failing_below")
    short = (
        f"; the largest size below it run with the full count, {fmt_count(below['per_group'][0])} "
        f"in the first group, had power {fmt_power(below['power'])}"
        if below
        else "; no smaller size was run with the full count"
    )
    return (
        f" Near the answer, sizes one apart differ in simulated power by about "
        f"{fmt_prob(settled['power_per_size'], 4)}, less than the Monte Carlo standard error of "
        f"one run ({fmt_prob(settled['mcse'], 4)}), so the confirmation did not look for the exact "
        "size where power crosses the target: the size reported is the smallest run with "
        f"{fmt_count(replicates)} replicates whose power met it{short}. By Monte Carlo error alone "
        f"the answer is uncertain by about ±{settled['sizes_per_mcse']:.1f} in the first group's "
        "size."
    )


# What each verdict of the type I error check means, in the record's own verdict words.
SIZE_WORDS = {
    "holds": ": the type I error check holds, so the test keeps its level under this data model.",
    "conservative": ": the type I error check is conservative (the whole interval lies below "
    "alpha), so the test rejects a true null hypothesis less often than stated, which keeps it "
    "valid but costs some power.",
    "exceeds": ": the type I error check exceeds alpha (the whole interval lies above it), so "
    "the test does not hold its level under this data model: it rejects a true null hypothesis "
    "more often than stated, and a significant result would overstate the evidence. Choose a "
    "test that holds its level here, or a smaller alpha confirmed by simulation.",
}
SIZE_LABELS = {
    "holds": "holds",
    "conservative": "conservative: valid, costs some power",
    "exceeds": "exceeds alpha: not valid here",
}


def size_verdict(t1: dict, alpha: float | None = None) -> str:
    """The verdict of a type I error block (recomputed when judged against another alpha)."""
    if t1.get("verdict") in SIZE_WORDS and alpha is None:
        return t1["verdict"]
    return simulate.size_verdict(t1["ci95"], t1["alpha"] if alpha is None else alpha)


# --- the paragraph -----------------------------------------------------------------------------


def events_of(record: dict) -> dict | None:
    """The analytic events block: required, unrounded and P(event) per group, else None."""
    ev = record.get("events") or {}
    if ev.get("required") is None:
        return None  # a simulation reports only the mean events per replicate
    return ev


def _sample_size_body(record: dict, context: dict | None, test_level: str) -> str:
    q, size = record["question"], record["sample_size"]
    steps = size["steps"]
    analytic = record["method"].get("method") != "simulation"
    base = next(s for s in steps if s["step"] == "base")
    aim = hypothesis_words(q)
    lead = "" if aim == "to detect" else f" {aim[0].upper()}{aim[1:]},"
    body = (
        f"{lead} {'with' if lead else 'With'} {test_level} and a target power of "
        f"{fmt_pct(q['target_power'])}, and assuming {assumed_text(q, record)},"
    )
    ev = events_of(record)
    own = "" if ev else size_words(record)  # the cell's own words for its size, if any
    if ev:
        p = ev["probability"]
        chance = (
            f"{fmt_prob(p['control'])} in the control group and {fmt_prob(p['treatment'])} in "
            f"the treatment group (allocation-weighted mean {fmt_prob(p['mean'])})"
            if "control" in p
            else fmt_prob(p["mean"])
        )
        body += (
            f" {fmt_count(ev['required'])} events are "
            f"{'expected' if ev.get('basis') == 'expected' else 'required'} "
            f"(unrounded {_raw(ev['raw'])}). "
            f"With a probability of an event during the study of {chance}, this needs "
            f"{_per_group(base['per_group'], q)}"
        )
        if len(base["per_group"]) > 1:
            body += f" ({fmt_count(sum(base['per_group']))} in total)"
    else:
        if own:
            body += f" {own}"
        else:
            body += f" {_per_group(base['per_group'], q)}"
            if len(base["per_group"]) > 1:
                body += f" ({fmt_count(sum(base['per_group']))} in total)"
            body += " are needed before adjustment"
        # A simulated or an exact search lands on whole numbers; only a formula has an
        # unrounded answer.
        searched = size_search(record)
        if searched:
            body += f" ({searched})"
        elif analytic:
            raw = list(dict.fromkeys(base["per_group_raw"]))
            body += f" (unrounded {', '.join(_raw(x) for x in raw)})"
    body += "." + _source(context)
    chain = _steps_sentence(steps, size["total"], q)
    if chain:
        body += " " + chain
    elif len(size["per_group"]) > 1:
        body += (
            f" No further adjustment was applied: {fmt_count(size['total'])} are to be "
            "enrolled in total."
        )
    if analytic and not own:  # a cell's own size words leave its power to its details
        body += f" The power at the analyzed size is {fmt_power(record['power']['estimate'])}."
    if ev and ev.get("calendar_time") is not None:
        body += (
            f" At the analyzed size these events are expected about "
            f"{fmt_num(round(ev['calendar_time'], 1))} {ev.get('time_unit', 'time units')} after "
            "the first participant enters, under the stated accrual and follow-up."
        )
    return body


def _power_words(record: dict) -> str:
    """'power to detect … is 80.1%.': the record's power against what it detects."""
    q = record["question"]
    assumed, verb = assumed_text(q, record), hypothesis_words(q)
    target = f"{verb} {assumed}" if verb == "to detect" else f"{verb}, assuming {assumed}"
    return f"power {target} is {fmt_power(record['power']['estimate'])}."


def _given_size_body(record: dict, context: dict | None, test_level: str) -> str:
    q, size = record["question"], record["sample_size"]
    own = size_words(record) if q["find"] == "power" else ""
    if own:  # the cell says its size itself (a two-stage design's maximum and expected sizes)
        return f" With {test_level}, {own}, and its {_power_words(record)}" + _source(context)
    analyzed = size.get("analyzed_per_group") or size["per_group"]
    body = f" With {_enrolled(size['per_group'], size['total'], q)}"
    if size.get("clusters_per_group"):
        body += (
            f" in {_clusters(size['clusters_per_group'])} of mean size "
            f"{fmt_num(size['mean_cluster_size'])} (whole clusters randomized, analyzed by "
            "the cluster-level t test)"
        )
    body += f" and {test_level}"
    losses = [s for s in size["steps"] if s["step"] in ("dropout", "design_effect")]
    if losses:
        words = [
            f"{fmt_pct(s['rate'])} dropout"
            if s["step"] == "dropout"
            else f"a design effect of {fmt_num(s['factor'])}"
            for s in losses
        ]
        body += (
            f" (after {' and '.join(words)}, an effective {_analyzed(analyzed, q)} are analyzed)"
        )
    # find = effect: the effect is the answer, so "given" names only the assumptions
    assumed = assumed_text(q, record, effect=q["find"] == "power")
    if q["find"] == "power":
        body += f", the {_power_words(record)}"
    else:
        eff = record["effect"]
        body += (
            f", the smallest {field_label(q, eff['field'])} detectable with "
            f"{fmt_pct(q['target_power'])} power, given {assumed}, is {fmt_num(eff['value'])}."
        )
    return body + _source(context)


def estimand_text(q: dict) -> str:
    """What a precision question estimates, with its planning values, in the cell's words."""
    own = cell(q).phrases.estimand
    if own is not None:
        return own(q)
    assumed = assumptions_text(q)
    return "the estimand" + (f", assuming {assumed}" if assumed else "")


def interval_words(q: dict) -> str:
    """'a two-sided 95% confidence interval whose half-width is at most 3 (expected)'; a cell
    with several intervals says them in its own words (``Estimation.interval_words``)."""
    own = cell(q).estimation.interval_words
    if own is not None:
        return own(q)
    hyp = q["hypothesis"]
    text = f"a two-sided {fmt_pct(hyp['confidence'])} confidence interval"
    if hyp.get("half_width") is None:
        return text
    text += f" whose half-width is at most {fmt_num(hyp['half_width'])}"
    if hyp.get("assurance") is not None:
        return text + f" with a probability of at least {fmt_pct(hyp['assurance'])}"
    return f"{text} {cell(q).estimation.expected_words}"


def precision_sentence(record: dict) -> str:
    """The half-width at the analyzed size, in words, from the record's ``precision`` block."""
    p, q = record["precision"], record["question"]
    own = cell(q).estimation.precision_words
    if own is not None:
        return own(record)
    where = "At the analyzed size" if q["find"] == "sample_size" else "At this size"
    text = f" {where} the half-width is {fmt_num(p['half_width_expected'])} {p['basis']}"
    if p.get("half_width_assured") is not None:
        text += (
            f", and with a probability of {fmt_pct(p['assurance'])} it is at most "
            f"{fmt_num(p['half_width_assured'])}"
        )
    text += "."
    if p.get("probability") is not None and p.get("assurance") is None:
        text += (
            f" Because the sample SD varies, the probability that the interval actually obtained "
            f"has a half-width of at most {fmt_num(p['half_width_target'])} is "
            f"{fmt_pct(p['probability'])}; an assurance (hypothesis.assurance) sizes the study "
            "so that this probability is as high as required (Kupper & Hafner 1989)."
        )
    return text


def _estimation_body(record: dict, context: dict | None) -> str:
    q, size = record["question"], record["sample_size"]
    if q["find"] == "precision":
        body = f" With {_enrolled(size['per_group'], size['total'], q)}"
        dropout = next((s for s in size["steps"] if s["step"] == "dropout"), None)
        if dropout is not None:
            body += (
                f" (after {fmt_pct(dropout['rate'])} dropout, an effective "
                f"{_analyzed(size['analyzed_per_group'], q)} are analyzed)"
            )
        several = cell(q).estimation.interval_words is not None  # "two … intervals estimate"
        body += (
            f", {interval_words(q)} {'estimate' if several else 'estimates'} {estimand_text(q)}."
        )
        return body + precision_sentence(record) + _source(context)
    base = next(s for s in size["steps"] if s["step"] == "base")
    raw = list(dict.fromkeys(base["per_group_raw"]))
    body = (
        f" The study aims to estimate {estimand_text(q)}, by {interval_words(q)}. This needs "
        f"{_per_group(base['per_group'], q)}"
    )
    if len(base["per_group"]) > 1:
        body += f" ({fmt_count(sum(base['per_group']))} in total)"
    body += f" before adjustment (unrounded {', '.join(_raw(x) for x in raw)})." + _source(context)
    chain = _steps_sentence(size["steps"], size["total"], q)
    if chain:
        body += " " + chain
    elif len(size["per_group"]) > 1:
        body += (
            f" No further adjustment was applied: {fmt_count(size['total'])} are to be "
            "enrolled in total."
        )
    return body + precision_sentence(record)


def justification(record: dict, context: dict | None = None) -> str:
    """Return a protocol-ready paragraph justifying the sample size (or power) in the record."""
    q = record["question"]
    if record.get("precision") is not None:
        what = "sample size" if q["find"] == "sample_size" else "precision"
        opening = (
            f"The {what} was determined for the design “{cell_label(q)}”; planned analysis: "
            f"{analysis_label(q, record)}. {method_sentence(record)}"
        )
        warnings = "".join(f" Note: {w.rstrip('.')}." for w in record.get("warnings") or [])
        note = method_note(record)
        body = _estimation_body(record, context)
        return _tidy(opening + body + (f" {note}" if note else "") + warnings)
    what = {"sample_size": "sample size", "power": "power", "effect": "detectable effect"}[
        q["find"]
    ]
    opening = (
        f"The {what} was determined for the design “{cell_label(q)}”; planned analysis: "
        f"{analysis_label(q, record)}. {method_sentence(record)}"
    )
    alpha_note = (record.get("method") or {}).get("alpha_note")
    if alpha_note:
        opening += f" The test used {alpha_note}."
    test_level = _alpha(q, record["sample_size"]["steps"])
    if q["find"] == "sample_size":
        body = _sample_size_body(record, context, test_level)
    else:
        body = _given_size_body(record, context, test_level)
    body += details_sentence(record)
    body += interim.sentence(record)
    body += multiplicity_sentence(record)
    body += assurance_sentence(record)
    simulated = record["method"].get("method") == "simulation"
    sim = _simulation(record) if simulated else ""
    warnings = "".join(f" Note: {w.rstrip('.')}." for w in record.get("warnings") or [])
    note = method_note(record)
    return _tidy(opening + body + sim + (f" {note}" if note else "") + warnings)


def _own_words(record: dict, hook: str, default):
    """What the cell's ``Phrases`` hook ``hook`` says of the record, ``default`` without one."""
    phrases = cell(record["question"]).phrases
    words = getattr(phrases, hook) if phrases is not None else None
    return words(record) if words is not None else default


def details_sentence(record: dict) -> str:
    """The cell's own sentences on its answer details (``Phrases.details``), '' when none."""
    return _own_words(record, "details", "")


def size_words(record: dict) -> str:
    """The solved size in the cell's own words (``Phrases.size``), '' for the shared wording."""
    return _own_words(record, "size", "")


def size_figures(record: dict) -> list[tuple[str, str]]:
    """The answer's figures in the cell's own words (``Phrases.figures``), [] for the shared."""
    return _own_words(record, "figures", [])


def size_stages(record: dict) -> dict | None:
    """The cell's table in place of the adjustment steps (``Phrases.stages``), else None."""
    return _own_words(record, "stages", None)


def assurance_sentence(record: dict) -> str:
    """Assurance beside power, and one plain sentence on how they differ ('' when not asked)."""
    a = record.get("assurance")
    if not a:
        return ""
    prior = a["prior"]
    span = ""
    if prior.get("lower") is not None or prior.get("upper") is not None:
        lo = "−∞" if prior.get("lower") is None else fmt_num(prior["lower"])
        hi = "∞" if prior.get("upper") is None else fmt_num(prior["upper"])
        span = f", truncated to [{lo}, {hi}]"
    text = (
        f" Taking the uncertainty about the effect into account, with a normal prior of mean "
        f"{fmt_num(prior['mean'])} and SD {fmt_num(prior['sd'])}{span} on the "
        f"{a['field'].replace('_', ' ')}, the assurance (probability of a significant result in "
        f"the beneficial direction) is {fmt_pct(a['estimate'])}, against a power of "
        f"{fmt_pct(a['power'])} (O'Hagan, Stevens & Campbell 2005). Power assumes the effect is "
        "exactly the one stated; assurance averages the power over the plausible effects, so it "
        "is lower when some of them are small or unfavorable, and it can never exceed the prior "
        f"probability that the effect is beneficial ({fmt_pct(a['ceiling'])})."
    )
    if "target" in a:
        if a.get("target_per_group") is None:
            text += (
                f" An assurance of {fmt_pct(a['target'])} cannot be reached at any size: it is "
                "at or above that prior probability."
            )
        else:
            text += (
                f" An assurance of {fmt_pct(a['target'])} needs "
                f"{_per_group(a['target_per_group'], record['question'])} analyzed (before "
                "any dropout adjustment)."
            )
    return text


def _tidy(text: str) -> str:
    # Joined fragments can leave doubled spaces or punctuation; the wording itself is fixed above.
    while "  " in text:
        text = text.replace("  ", " ")
    return text.replace(" ,", ",").replace("..", ".").strip()
