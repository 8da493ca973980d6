"""The sample-size justification: one paragraph of plain scientific English, ready for a protocol.

Every number comes from the result record and is formatted by the helpers below, so a test can
find each one and nothing in the text can disagree with the record. Counts use a thousands
separator (``1,016``); seeds are printed as digits only so they can be copied exactly.
"""

from __future__ import annotations

from service.engine import direction, simulate

__all__ = [
    "DESIGN_PHRASES",
    "TEST_NAMES",
    "fmt_count",
    "fmt_num",
    "fmt_pct",
    "fmt_prob",
    "justification",
]

DESIGN_PHRASES = {
    "two_means": "a comparison of means between two independent groups",
    "paired_mean": "a paired comparison of means (within-pair differences)",
    "one_mean": "a comparison of one mean with a reference value",
    "two_proportions": "a comparison of proportions between two independent groups",
    "anova_oneway": "a comparison of means across several groups (one-way analysis of variance)",
    "correlation": "a test of a correlation coefficient",
    "rank_sum": "a rank-based comparison of two independent groups",
    "survival_logrank": "a comparison of time-to-event outcomes between two groups",
}

TEST_NAMES = {
    "student_t": "Student's t test",
    "welch_t": "Welch's t test",
    "rank_sum": "the Wilcoxon–Mann–Whitney rank-sum test",
    "signed_rank": "the Wilcoxon signed-rank test",
    "z_test": "the z test for two proportions",
    "fisher_exact": "Fisher's exact test",
    "f_test": "the one-way analysis of variance F test",
    "kruskal_wallis": "the Kruskal–Wallis test",
    "pearson": "the test of Pearson's correlation",
    "logrank": "the log-rank test",
}

_PARAM = {
    "sd": "SD",
    "mu": "log-scale mean",
    "sigma": "log-scale SD",
    "df": "degrees of freedom",
    "loc": "location",
}

_UNIT = {
    "paired_mean": ("pair", "pairs"),
    "one_mean": ("participant", "participants"),
    "correlation": ("participant", "participants"),
}


# --- number formats (public so tests format the record the same way) ------------------------


def fmt_num(x: float) -> str:
    """Format an input value compactly with up to 6 significant digits (0.5, 12, 0.0578)."""
    return f"{float(x):g}"


def fmt_count(n: float) -> str:
    """Format a whole count with a thousands separator (1,016)."""
    return f"{int(n):,}"


def fmt_prob(p: float, digits: int = 3) -> str:
    """Format a probability as a decimal with ``digits`` places (0.803)."""
    return f"{float(p):.{digits}f}"


def fmt_pct(p: float) -> str:
    """Format a probability as a percentage without trailing zeros (0.8 → 80%, 0.825 → 82.5%)."""
    return f"{100 * float(p):.4g}%"


def _raw(x: float) -> str:
    return f"{float(x):.2f}"


# --- phrases ------------------------------------------------------------------------------


def _units(design: str) -> tuple[str, str]:
    return _UNIT.get(design, ("participant", "participants"))


def _per_arm(per_arm: list, design: str) -> str:
    """'64 per group', '339 in the control group and 677 in the treatment group', '34 pairs'."""
    one, many = _units(design)
    if len(per_arm) == 1:
        return f"{fmt_count(per_arm[0])} {one if per_arm[0] == 1 else many}"
    if len(set(per_arm)) == 1:
        return f"{fmt_count(per_arm[0])} per group"
    if len(per_arm) == 2:
        return (
            f"{fmt_count(per_arm[0])} in the control group and {fmt_count(per_arm[1])} in the "
            "treatment group"
        )
    parts = [f"{fmt_count(n)} in group {i + 1}" for i, n in enumerate(per_arm)]
    return ", ".join(parts[:-1]) + " and " + parts[-1]


def _enrolled(per_arm: list, total: int, design: str) -> str:
    """'30 enrolled per group (60 in total)', '20 pairs enrolled'."""
    if len(per_arm) == 1:
        return f"{_per_arm(per_arm, design)} enrolled"
    if len(set(per_arm)) == 1:
        return f"{fmt_count(per_arm[0])} enrolled per group ({fmt_count(total)} in total)"
    return f"{_per_arm(per_arm, design)} enrolled ({fmt_count(total)} in total)"


def _analysed(per_arm: list, design: str) -> str:
    # Effective sizes after dropout or clustering are fractional; one decimal says so honestly.
    if len(per_arm) == 1:
        return f"{per_arm[0]:.1f} {_units(design)[1]}"
    if len(set(per_arm)) == 1:
        return f"{per_arm[0]:.1f} per group"
    return " and ".join(f"{x:.1f}" for x in per_arm) + " in the groups"


def _effect(q: dict) -> str:
    """The assumed effect in words, every value as in the question."""
    e, design = q.get("effect") or {}, q["design"]
    has = e.get
    if design == "two_means":
        sds = (
            f"a common standard deviation of {fmt_num(e['sd_control'])}"
            if e.get("sd_control") == e.get("sd_treatment")
            else f"standard deviations of {fmt_num(e['sd_control'])} (control) and "
            f"{fmt_num(e['sd_treatment'])} (treatment)"
        )
        if has("difference") is None:
            return sds
        return f"a difference in means of {fmt_num(e['difference'])} with {sds}"
    if design == "one_mean":
        sd = f"a standard deviation of {fmt_num(e['sd'])}"
        return (
            sd
            if has("difference") is None
            else f"a difference of {fmt_num(e['difference'])} from the reference value with {sd}"
        )
    if design == "paired_mean":
        sd = f"a standard deviation of the differences of {fmt_num(e['sd_difference'])}"
        return (
            sd
            if has("difference") is None
            else f"a mean within-pair difference of {fmt_num(e['difference'])} with {sd}"
        )
    if design == "two_proportions":
        parts = []
        if has("p_control") is not None:
            parts.append(f"a control proportion of {fmt_num(e['p_control'])}")
        if has("p_treatment") is not None:
            parts.append(f"a treatment proportion of {fmt_num(e['p_treatment'])}")
        text = " and ".join(parts)
        if e.get("continuity_correction"):
            text += " (with a continuity correction)"
        return text
    if design == "anova_oneway":
        text = f"{fmt_count(e['groups'])} groups"
        if has("cohens_f") is not None:
            text = f"an effect size f of {fmt_num(e['cohens_f'])} across {text}"
        if e.get("group_means") is not None and e.get("sd") is not None:
            means = ", ".join(fmt_num(m) for m in e["group_means"])
            text += f" (group means {means}, within-group standard deviation {fmt_num(e['sd'])})"
        return text
    if design == "correlation":
        null = f"a null value of {fmt_num(e.get('r0') or 0.0)}"
        return null if has("r") is None else f"a correlation of {fmt_num(e['r'])} against {null}"
    if design == "rank_sum":
        if has("prob_superiority") is None:
            return "the stated groups"
        return (
            f"a probability of {fmt_num(e['prob_superiority'])} that a treatment observation "
            "exceeds a control observation"
        )
    if design == "survival_logrank":
        parts = []
        if has("hazard_ratio") is not None:
            parts.append(f"a hazard ratio (treatment to control) of {fmt_num(e['hazard_ratio'])}")
        control = f"a control hazard of {fmt_num(e['hazard_control'])} per time unit"
        if e.get("median_control") is not None:
            control += f" (median survival {fmt_num(e['median_control'])})"
        parts.append(control)
        parts.append(
            f"uniform accrual over {fmt_num(e['accrual_period'])} and further follow-up of "
            f"{fmt_num(e['follow_up'])} time units"
        )
        if e.get("loss_rate"):
            parts.append(f"a loss-to-follow-up hazard of {fmt_num(e['loss_rate'])}")
        return ", ".join(parts[:-1]) + " and " + parts[-1]
    return "the stated effect"


def _hypothesis(q: dict) -> str:
    hyp = q.get("hypothesis") or {}
    kind, margin = hyp.get("kind", "superiority"), hyp.get("margin")
    if kind == "noninferiority":
        return f"to show non-inferiority with a margin of {fmt_num(margin)}"
    if kind == "equivalence":
        return f"to show equivalence within ±{fmt_num(margin)} by two one-sided tests (TOST)"
    return "to detect"


# Which way a one-sided superiority test looked (engine/direction.py), in words.
_ONE_SIDED = {
    False: {1: "a higher value than under the null", -1: "a lower value than under the null"},
    True: {1: "longer times to the event", -1: "shorter times to the event"},
}


def _aim(q: dict) -> int:
    data = (q.get("simulation") or {}).get("data")
    implied = None
    if isinstance(data, dict):
        arms = [data[k] for k in ("control", "treatment", "sample") if k in data]
        try:
            implied = direction.implied(q["design"], arms)
        except (KeyError, TypeError, ValueError):
            implied = None
    return direction.one_sided(q, q["design"], implied)


def _alpha(q: dict, steps: list[dict]) -> str:
    # The F test has no sides; saying "two-sided" there would misdescribe it.
    sides = (
        ""
        if q["design"] == "anova_oneway"
        else ("one-sided " if int(q.get("sides", 2)) == 1 else "two-sided ")
    )
    text = f"a {sides}significance level of {fmt_num(q['alpha'])}"
    hyp = q.get("hypothesis") or {}
    if sides == "one-sided " and hyp.get("kind", "superiority") == "superiority":
        text += f" (the alternative: {_ONE_SIDED[q['design'] == 'survival_logrank'][_aim(q)]})"
    for step in steps:
        if step["step"] == "bonferroni":
            text += (
                f", divided by Bonferroni over {fmt_count(step['comparisons'])} comparisons to "
                f"{fmt_num(step['alpha_per_comparison'])} per comparison,"
            )
    return text


def _steps_sentence(steps: list[dict], total: int, design: str) -> str:
    """The adjustment chain after the base n, each step with its inputs and its rounded result."""
    if any(step["step"] in ("cluster_df", "cluster_size") for step in steps):
        return _cluster_sentence(steps, total)
    parts = []
    for step in steps:
        if step["step"] == "design_effect":
            clusters = step.get("clusters_per_arm")
            text = (
                f"allowing for clustering (mean cluster size {fmt_num(step['mean_cluster_size'])}, "
                f"intracluster correlation {fmt_num(step['icc'])}, design effect "
                f"{fmt_num(step['factor'])}) raises this to {_per_arm(step['per_arm'], design)}"
            )
            if clusters:
                text += f" ({_clusters(clusters)})"
            parts.append(text)
        elif step["step"] == "dropout":
            parts.append(
                f"allowing for {fmt_pct(step['rate'])} dropout (dividing by 1 − "
                f"{fmt_num(step['rate'])}) gives {_per_arm(step['per_arm'], design)}"
            )
    if not parts:
        return ""
    text = "; ".join(parts)
    return text[0].upper() + text[1:] + f", so {fmt_count(total)} are to be enrolled in total."


def _cluster_inputs(step: dict, dropout: dict | None) -> str:
    """'mean cluster size 20 (16 analysed after 20% dropout), …, design effect 1.75'."""
    size = fmt_num(step["mean_cluster_size"])
    if dropout is not None:
        size += (
            f" ({fmt_num(step['analysed_cluster_size'])} analysed after "
            f"{fmt_pct(dropout['rate'])} dropout within clusters)"
        )
    text = f"mean cluster size {size}, intracluster correlation {fmt_num(step['icc'])}"
    if step.get("cv"):
        text += f", coefficient of variation of cluster size {fmt_num(step['cv'])}"
    return text + f", design effect {fmt_num(step['factor'])}"


def _individuals(per_arm: list) -> str:
    if len(set(per_arm)) == 1:
        return f"{_raw(per_arm[0])} individuals per group"
    return " and ".join(_raw(x) for x in per_arm) + " individuals in the groups"


def _cluster_sentence(steps: list[dict], total: int) -> str:
    """The cluster chain: design effect, cluster-level df, whole clusters × their size."""
    by = {s["step"]: s for s in steps}
    enrolled = by["enrolled"]
    clusters = enrolled["clusters_per_arm"]
    parts = []
    if "design_effect" in by:
        de = by["design_effect"]
        parts.append(
            f"Whole clusters are randomized ({_cluster_inputs(de, by.get('dropout'))}); by the normal "
            f"approximation this needs {_individuals(de['per_arm_raw'])} "
            f"({_clusters(de['clusters_per_arm'])})"
        )
    if "cluster_df" in by:
        df = by["cluster_df"]
        parts.append(
            f"the cluster-level t test with {fmt_count(df['df'])} degrees of freedom (clusters "
            f"− 2) needs {_clusters(df['clusters_per_arm'])} (power "
            f"{fmt_pct(round(df['power'], 3))})"
        )
    if "simulation" in by:
        parts.append(f"the simulation settles on {_clusters(by['simulation']['clusters_per_arm'])}")
    if "cluster_size" in by:
        cs = by["cluster_size"]
        parts.append(
            f"Whole clusters are randomized with {_clusters(cs['clusters_per_arm'])} fixed "
            f"({_cluster_inputs(cs, by.get('dropout'))}); the smallest whole cluster size whose cluster-level t test "
            f"({fmt_count(cs['df'])} degrees of freedom) reaches the target is "
            f"{fmt_num(cs['mean_cluster_size'])} (power {fmt_pct(round(cs['power'], 3))})"
        )
    people = enrolled["per_arm"]
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


def _method(record: dict) -> str:
    m = record.get("method") or {}
    if m.get("kind") == "analytic":
        ref = f" ({m['reference']})" if m.get("reference") else ""
        return f"The calculation used the analytic method “{m.get('formula', '')}”{ref}."
    test = TEST_NAMES.get(m.get("test"), m.get("test", "the stated test"))
    return f"The calculation used Monte Carlo simulation of {test}."


def _source(context: dict | None) -> str:
    source = (context or {}).get("effect_source")
    if source and str(source).strip():
        return f" The assumed values are based on {str(source).strip().rstrip('.')}."
    return (
        " [State the source of the assumed values: pilot data, literature or clinical judgement.]"
    )


def _arm_words(arm: dict) -> str:
    params = ", ".join(
        f"{_PARAM.get(k, k.replace('_', ' '))} {fmt_num(v)}"
        for k, v in arm.items()
        if k != "family"
    )
    return f"{arm['family'].replace('_', ' ')} ({params})"


def _data_model(data: dict | None) -> str:
    if not data:
        return ""
    arms = []
    for label, arm in data.items():
        if isinstance(arm, dict) and "family" in arm:
            arms.append(f"{label} {_arm_words(arm)}")
        elif label == "groups" and isinstance(arm, list):
            arms.extend(f"group {i + 1} {_arm_words(a)}" for i, a in enumerate(arm))
    return f" The simulated data were {'; '.join(arms)}." if arms else ""


def _simulation(record: dict) -> str:
    """Replicates, seed, Monte Carlo error of the power and the type I error check."""
    repro, power, sim = record["reproducibility"], record["power"], record["question"]["simulation"]
    search = record.get("search")
    text = _data_model((record.get("method") or {}).get("data"))
    if (record.get("method") or {}).get("implied_effect"):
        text += (
            " The assumed effect stated above is the one this data model implies "
            "(derived from its arms, not taken from separately posted effect values)."
        )
    what = "effect" if record["question"]["find"] == "effect" else "size"
    if search:
        text += (
            f" Candidate {what}s were screened with {fmt_count(search['search_replicates'])} "
            f"simulated trials each, and the chosen {what} was confirmed"
        )
    else:
        text += " The power was estimated"
    text += (
        f" with {fmt_count(power['replicates'])} simulated trials (seed {repro['seed']}, "
        f"{repro['bit_generator']} generator): estimated power {fmt_prob(power['estimate'])}, "
        f"Monte Carlo standard error {fmt_prob(power['mcse'], 4)}, 95% interval "
        f"{fmt_prob(power['ci95'][0])} to {fmt_prob(power['ci95'][1])}."
    )
    if sim.get("decision_rule") == "lower_bound" and record["question"]["find"] == "sample_size":
        text += " The size was accepted only when the lower 95% bound reached the target power."
    if power.get("analytic") is not None:
        where = "the simulated effect" if what == "effect" else "the same size"
        text += f" The analytic formula gives a power of {fmt_prob(power['analytic'])} at {where}."
    t1 = record.get("type_i_error")
    if t1:
        text += (
            f" Under the null hypothesis ({t1['null_model'].replace('(', '[').replace(')', ']')}) "
            "the simulated type I error was "
            f"{fmt_prob(t1['estimate'], 4)} (Monte Carlo standard error {fmt_prob(t1['mcse'], 4)}, "
            f"95% interval {fmt_prob(t1['ci95'][0], 4)} to {fmt_prob(t1['ci95'][1], 4)}) against "
            f"the nominal {fmt_num(t1['alpha'])}"
        )
        text += f"{SIZE_WORDS[size_verdict(t1)]}"
    return text


# What each size verdict means for the investigator (the verdicts: simulate.size_verdict).
SIZE_WORDS = {
    "holds": ", consistent with it: the test holds its level under this data model.",
    "conservative": "; the whole interval lies below it, so the test is conservative: it "
    "rejects a true null hypothesis less often than stated, which keeps it valid but costs "
    "some power.",
    "exceeds": "; the whole interval lies above it, so the test does not hold its level under "
    "this data model: it rejects a true null hypothesis more often than stated, and a "
    "significant result would overstate the evidence. Choose a test that holds its level "
    "here, or a smaller alpha confirmed by simulation.",
}
SIZE_LABELS = {
    "holds": "holds its level",
    "conservative": "conservative: valid, costs some power",
    "exceeds": "exceeds alpha: not valid here",
}


def size_verdict(t1: dict, alpha: float | None = None) -> str:
    """The verdict of a simulated size block (recomputed for records made before verdicts)."""
    if t1.get("verdict") in SIZE_WORDS and alpha is None:
        return t1["verdict"]
    return simulate.size_verdict(t1["ci95"], t1["alpha"] if alpha is None else alpha)


def justification(record: dict, context: dict | None = None) -> str:
    """Return a protocol-ready paragraph justifying the sample size (or power) in the record."""
    q = record["question"]
    design, find = q["design"], q["find"]
    size = record["sample_size"]
    steps = size["steps"]
    phrase = DESIGN_PHRASES.get(design, f"the {design} design")
    what = {"sample_size": "sample size", "power": "power", "effect": "detectable effect"}[find]
    opening = f"The {what} was determined for {phrase}. {_method(record)}"
    alpha_note = (record.get("method") or {}).get("alpha_note")
    if alpha_note:
        opening += f" The test used {alpha_note}."
    power = record["power"]
    test_level = _alpha(q, steps)
    body = ""
    if find == "sample_size":
        base = next(s for s in steps if s["step"] == "base")
        aim = _hypothesis(q)
        lead = "" if aim == "to detect" else f" {aim[0].upper()}{aim[1:]},"
        body = (
            f"{lead} {'with' if lead else 'With'} {test_level} and a target power of "
            f"{fmt_pct(q['target_power'])}, and assuming {_effect(q)},"
        )
        if record.get("events"):
            ev = record["events"]
            p = ev["p_event"]
            body += (
                f" {fmt_count(ev['events']['required'])} events are required (unrounded "
                f"{_raw(ev['events']['raw'])}). With a probability of an event during the study "
                f"of {fmt_prob(p['control'])} in the control group and {fmt_prob(p['treatment'])} "
                f"in the treatment group (allocation-weighted mean {fmt_prob(p['mean'])}), this "
                f"needs {_per_arm(base['per_arm'], design)}"
            )
        else:
            body += f" {_per_arm(base['per_arm'], design)}"
            if len(base["per_arm"]) > 1:
                body += f" ({fmt_count(sum(base['per_arm']))} in total)"
            body += " are needed before adjustment"
            # A simulated search lands on whole numbers; only a formula has an unrounded answer.
            if record["method"].get("kind") == "analytic":
                raw = list(dict.fromkeys(base["per_arm_raw"]))
                body += f" (unrounded {', '.join(_raw(x) for x in raw)})"
        if record.get("events") and len(base["per_arm"]) > 1:
            body += f" ({fmt_count(sum(base['per_arm']))} in total)"
        body += "."
        body += _source(context)
        chain = _steps_sentence(steps, size["total"], design)
        if chain:
            body += " " + chain
        elif len(size["per_arm"]) > 1:
            body += f" No further adjustment was applied: {fmt_count(size['total'])} are to be enrolled in total."
        if record["method"].get("kind") == "analytic":
            body += f" The power at the analysed size is {fmt_pct(round(power['estimate'], 3))}."
    else:
        analysed = size.get("analysed_per_arm") or size["per_arm"]
        body = f" With {_enrolled(size['per_arm'], size['total'], design)}"
        if size.get("clusters_per_arm"):
            body += (
                f" in {_clusters(size['clusters_per_arm'])} of mean size "
                f"{fmt_num(size['mean_cluster_size'])} (whole clusters randomized, analysed by "
                "the cluster-level t test)"
            )
        body += f" and {test_level}"
        losses = [s for s in steps if s["step"] in ("dropout", "design_effect")]
        if losses:
            words = []
            for s in losses:
                if s["step"] == "dropout":
                    words.append(f"{fmt_pct(s['rate'])} dropout")
                else:
                    words.append(f"a design effect of {fmt_num(s['factor'])}")
            body += (
                f" (after {' and '.join(words)}, an effective "
                f"{_analysed(analysed, design)} are analysed)"
            )
        if find == "power":
            verb = _hypothesis(q)
            target = (
                f"{verb} {_effect(q)}" if verb == "to detect" else f"{verb}, assuming {_effect(q)}"
            )
            if record["method"].get("kind") == "analytic":
                body += f", the power {target} is {fmt_pct(round(power['estimate'], 3))}."
            else:
                body += f", the estimated power {target} is {fmt_prob(power['estimate'])}."
        else:
            eff = record["effect"]
            field = eff["field"].replace("_", " ")
            body += (
                f", the {field} detectable with {fmt_pct(q['target_power'])} power, given "
                f"{_effect(q)}, is {fmt_num(eff['value'])}."
            )
        body += _source(context)
    sim = _simulation(record) if record["method"].get("kind") == "simulation" else ""
    warnings = "".join(f" Note: {w.rstrip('.')}." for w in record.get("warnings") or [])
    return _tidy(opening + body + sim + warnings)


def _tidy(text: str) -> str:
    # Joined fragments can leave doubled spaces or punctuation; the wording itself is fixed above.
    while "  " in text:
        text = text.replace("  ", " ")
    return text.replace(" ,", ",").replace("..", ".").strip()
