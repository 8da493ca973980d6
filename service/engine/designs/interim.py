"""The question's optional ``interim`` block: planned interim analyses (a group-sequential design).

Declared once, as ``Field``s, so the schema, the catalogue, the JSON Schema and OpenAPI read the
same words. Only cells whose test statistic is asymptotically normal with independent
increments accept it (``Design.sequential``). Stdlib only: the schema layer imports this.
"""

from __future__ import annotations

from .base import Field

BLOCK = "interim"
SPENDING = ("obrien_fleming", "pocock", "hwang_shih_decani")
MAX_LOOKS = 10
# the simulation kernels whose statistic the simulated sequential test recomputes at each look
SIMULATED_KERNELS = (
    "t_pooled",
    "t_welch",
    "t_one_sample",
    "rank_sum",
    "signed_rank",
    "z_pooled",
    "z_unpooled",
    "fisher_exact",
)

FIELDS = (
    Field(
        "looks",
        BLOCK,
        "integer",
        "Number of planned analyses, the final one included.",
        "number of analyses",
        minimum=1,
        maximum=MAX_LOOKS,
    ),
    Field(
        "information_fractions",
        BLOCK,
        "number_list",
        "Share of the maximum information (subjects, or events for time to event) at each "
        "analysis, increasing and ending at 1; equally spaced when omitted.",
        "information fractions",
        minimum=0,
        maximum=1,
        exclusive_minimum=True,
        min_items=1,
    ),
    Field(
        "efficacy_spending",
        BLOCK,
        "choice",
        "Alpha-spending function of the efficacy boundaries (Lan & DeMets 1983).",
        "alpha-spending function",
        choices=SPENDING,
        default="obrien_fleming",
    ),
    Field(
        "efficacy_gamma",
        BLOCK,
        "number",
        "The gamma of the Hwang, Shih & DeCani alpha-spending function (negative: conservative "
        "early, like O'Brien-Fleming; 1: close to Pocock).",
        "alpha-spending gamma",
        minimum=-40,
        maximum=40,
        default=-4.0,
    ),
    Field(
        "futility_spending",
        BLOCK,
        "choice",
        "Beta-spending function of non-binding futility boundaries (one-sided tests only), or "
        "none.",
        "beta-spending function",
        choices=("none", *SPENDING),
        default="none",
    ),
    Field(
        "futility_gamma",
        BLOCK,
        "number",
        "The gamma of the Hwang, Shih & DeCani beta-spending function.",
        "beta-spending gamma",
        minimum=-40,
        maximum=40,
        default=-2.0,
    ),
)

LABELS = {
    "obrien_fleming": "O'Brien-Fleming-type",
    "pocock": "Pocock-type",
    "hwang_shih_decani": "Hwang-Shih-DeCani",
}


def defaults() -> dict:
    """The declared defaults of the block."""
    return {f.name: f.default for f in FIELDS if f.default is not None}


def check(block: dict) -> dict[str, list[str]]:
    """Rules across the block's fields, keyed by dotted path (ranges are the fields' own)."""
    errors: dict[str, list[str]] = {}
    looks = block.get("looks")
    fractions = block.get("information_fractions")
    if isinstance(looks, int) and isinstance(fractions, list) and fractions:
        where = f"{BLOCK}.information_fractions"
        if len(fractions) != looks:
            errors[where] = [f"must list {looks} fractions, one per analysis; got {len(fractions)}"]
        elif any(b <= a for a, b in zip(fractions, fractions[1:], strict=False)):
            errors[where] = [f"must increase strictly from analysis to analysis; got {fractions}"]
        elif abs(fractions[-1] - 1.0) > 1e-12:
            errors[where] = [f"must end at 1 (the final analysis); got {fractions[-1]:g}"]
    for which in ("efficacy", "futility"):
        family = block.get(f"{which}_spending") or defaults()[f"{which}_spending"]
        if block.get(f"{which}_gamma") is not None and family != "hwang_shih_decani":
            errors[f"{BLOCK}.{which}_gamma"] = [
                f"applies only with {which}_spending 'hwang_shih_decani'; got "
                f"{which}_spending {family!r}"
            ]
    return errors


def normalize(block: dict) -> dict:
    """The block as entered plus declared defaults; a gamma only beside its HSD family."""
    out = {
        "looks": int(block["looks"]),
        "information_fractions": list(block["information_fractions"])
        if block.get("information_fractions")
        else None,
    }
    for which in ("efficacy", "futility"):
        family = block.get(f"{which}_spending") or defaults()[f"{which}_spending"]
        out[f"{which}_spending"] = family
        if family == "hwang_shih_decani":
            gamma = block.get(f"{which}_gamma")
            out[f"{which}_gamma"] = float(defaults()[f"{which}_gamma"] if gamma is None else gamma)
    return out


def _simulation_refusal(design, q: dict, block: dict) -> tuple[str, str] | None:
    """What the simulated sequential test (engine/seqsim.py) cannot answer, else None."""
    model = getattr(design, "simulation", None)
    kernels = dict(getattr(model, "kernels", None) or {})
    analysis = q.get("analysis")
    if analysis and kernels.get(analysis) not in SIMULATED_KERNELS:
        offered = ", ".join(f'"{a}"' for a, k in kernels.items() if k in SIMULATED_KERNELS)
        return (
            "analysis",
            f"the simulated sequential test recomputes the statistic at every look; it is "
            f"offered for {offered or 'no analysis'} of {design.cell}, not {analysis!r} (the "
            "log-rank test's looks fall at event counts in calendar time: use method "
            "'analytic' for it)",
        )
    if not any(k in SIMULATED_KERNELS for k in kernels.values()):
        return (
            BLOCK,
            f"method 'simulation' with an interim block is offered for t, z, rank and Fisher "
            f"exact tests; {design.cell} has none (use method 'analytic')",
        )
    futility = block.get("futility_spending") or "none"
    if futility != "none":
        return (
            f"{BLOCK}.futility_spending",
            "futility boundaries spend beta under an analytic drift, which a posted data model "
            f"does not have: method 'simulation' takes efficacy boundaries only; got {futility!r} "
            "(use 'none', or method 'analytic')",
        )
    return None


def refusal(design, q: dict) -> tuple[str, str] | None:
    """(field, message) when the question cannot take interim analyses, else None."""
    block = q.get(BLOCK)
    if not block:
        return None
    if not getattr(design, "sequential", False):
        from . import all as all_designs

        fits = ", ".join(f'"{d.cell}"' for d in all_designs() if getattr(d, "sequential", False))
        return (
            BLOCK,
            f"interim analyses need a test statistic that is asymptotically normal with "
            f"independent increments; {design.cell} has none here (the cells that take an "
            f"interim block are {fits})",
        )
    if q.get("method") == "simulation":
        why = _simulation_refusal(design, q, block)
        if why:
            return why
    if ((q.get("adjustments") or {}).get("cluster")) is not None:
        return (BLOCK, "interim analyses are not offered for cluster-randomized questions")
    aim = (q.get("hypothesis") or {}).get("aim", "superiority")
    if aim == "equivalence":
        return (BLOCK, "interim analyses are offered for superiority and noninferiority aims")
    futility = block.get("futility_spending") or "none"
    if futility != "none" and q.get("alternative", "two-sided") == "two-sided":
        return (
            f"{BLOCK}.futility_spending",
            f"futility boundaries are offered for one-sided tests only; got {futility!r} "
            "with a two-sided alternative (use 'none', or alternative 'one-sided')",
        )
    return None
