"""The report's words and table for a question with interim analyses (the record's
``sequential`` block): one sentence for the justification, one row per analysis."""

from __future__ import annotations

from .describe import fmt_count, fmt_num, fmt_pct, fmt_power

FAMILIES = {
    "obrien_fleming": "O'Brien-Fleming-type",
    "pocock": "Pocock-type",
    "hwang_shih_decani": "Hwang-Shih-DeCani",
}


def _family(block: dict, which: str) -> str:
    name = FAMILIES[block[f"{which}_spending"]]
    gamma = block.get(f"{which}_gamma")
    return f"{name} (gamma {fmt_num(gamma)})" if gamma is not None else name


def _z(x: float | None) -> str:
    return "—" if x is None else f"{x:.3f}"


def _p(x: float | None) -> str:
    return "—" if x is None else f"{x:.4f}"


def sentence(record: dict) -> str:
    """The justification's account of the interim analyses, '' without them."""
    block = record.get("sequential")
    if not block:
        return ""
    looks = block["looks"]
    count = len(looks)
    fractions = ", ".join(fmt_pct(row["fraction"]) for row in looks)
    text = (
        f" The trial is analyzed {count} times ({count - 1} interim "
        f"{'analysis' if count == 2 else 'analyses'} and a final one) at {fractions} of the "
        f"maximum information, with efficacy boundaries from the {_family(block, 'efficacy')} "
        "alpha-spending function (Lan & DeMets 1983), so the overall type I error stays at "
        f"the significance level; the nominal significance levels are "
        f"{', '.join(_p(row['efficacy_p']) for row in looks)}."
    )
    if block["futility_spending"] != "none":
        text += (
            f" The trial may stop for futility under the {_family(block, 'futility')} "
            "beta-spending function; the futility boundaries are non-binding (ignoring them "
            "does not raise the type I error)."
        )
    inflation = block.get("inflation")
    interim_step = next((s for s in record["sample_size"]["steps"] if s["step"] == "interim"), None)
    if inflation is not None and interim_step is not None:
        fixed = ", ".join(fmt_num(x) for x in dict.fromkeys(interim_step["fixed_per_group_raw"]))
        single = f"{fixed} per group (unrounded)"
        fixed_events = (record.get("events") or {}).get("fixed_required")
        if fixed_events is not None:
            single = f"{fmt_count(fixed_events)} events ({fixed} per group, unrounded)"
        what = (
            "events and size above include" if fixed_events is not None else "size above includes"
        )
        text += (
            f" The {what} the interim analyses: a single final analysis would "
            f"need {single}, and the interim analyses multiply it by the inflation factor "
            f"{inflation:.4f}."
        )
    early = sum(row["stop_alternative"]["efficacy"] for row in looks[:-1])
    unit = "events" if "expected_events_alternative" in block else "subjects"
    key = "events" if unit == "events" else "total"
    if block.get("method") == "simulation":
        text += (
            f" The sequential test was simulated ({fmt_count(block['replicates'])} replicates "
            "of each data model): at every analysis the test is applied to the data accrued so "
            "far and compared with these boundaries, so the power, the stopping chances and the "
            "expected size below are simulated shares, not formulas."
        )
    text += (
        f" If the assumed effect is true, the chance of stopping early for efficacy is "
        f"{fmt_power(early)} and the expected number of {unit} is "
        f"{fmt_count(round(block[f'expected_{key}_alternative']))}"
        f" ({fmt_count(round(block[f'expected_{key}_null']))} if there is no effect)."
    )
    return text


def table(record: dict) -> dict | None:
    """The boundaries table of the report, None without interim analyses."""
    block = record.get("sequential")
    if not block:
        return None
    two_sided = block["alternative"] == "two-sided"
    rows = []
    for row in block["looks"]:
        size = row.get("events")
        rows.append(
            {
                "look": row["look"],
                "fraction": fmt_pct(row["fraction"]),
                "size": fmt_count(size)
                if size is not None
                else " / ".join(fmt_count(n) for n in row["per_group"]),
                "efficacy": ("±" if two_sided else "") + _z(row["efficacy_z"]),
                "efficacy_p": _p(row["efficacy_p"]),
                "futility": _z(row["futility_z"]),
                "alpha_spent": _p(row["alpha_spent"]),
                "stop_null": _p(row["stop_null"]["efficacy"] + row["stop_null"]["futility"]),
                "stop_alternative": _p(
                    row["stop_alternative"]["efficacy"] + row["stop_alternative"]["futility"]
                ),
            }
        )
    events = any(row.get("events") is not None for row in block["looks"])
    return {
        "rows": rows,
        "size_heading": "Events" if events else "Analyzed per group",
        "futility": block["futility_spending"] != "none",
        "caption": (
            f"Boundaries on the z scale{' (reject when |Z| reaches it)' if two_sided else ''}; "
            "nominal p is the level each analysis tests at; alpha spent is cumulative; the "
            "stopping probabilities count efficacy and futility stops, with no effect and with "
            "the assumed effect."
        ),
    }
