"""The question's cross-field rules, one function per group, for any cell.

``check(ctx)`` runs the groups in order; each reads the posted question (``ctx.raw``), what its
fields loaded (``ctx.data``) and the cell's design, and adds field-keyed messages that name
what is allowed. Nothing here names a design: the design object's declarations (fields, forms,
analyses and their methods and aims) and its pure functions decide.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from service.engine.adjust import ratio_fraction, split_total
from service.engine.designs import interim as interim_rules

from . import resolve
from .cell import Cell
from .data_models import data_keys
from .fields import got, number_text, posted, put_error, show
from .vocabulary import cells, takes_ratio


@dataclass
class Context:
    """One posted question under check."""

    raw: Mapping
    data: dict
    design: Any = None
    errors: dict = field(default_factory=dict)
    cell: Cell | None = None
    # The question as normalization would give it, built once (see _partial).
    partial: dict | None = field(default=None, repr=False)

    @property
    def find(self) -> str | None:
        return self.data.get("find") if "find" in self.data else None

    @property
    def aim(self) -> str | None:
        """The aim, or None when the hypothesis block failed its own checks."""
        if "hypothesis" not in self.data and posted(self.raw, "hypothesis"):
            return None
        return (self.data.get("hypothesis") or {}).get("aim", "superiority")

    def add(self, dotted: str, message: str) -> None:
        put_error(self.errors, tuple(dotted.split(".")), message)


def check(ctx: Context) -> None:
    """Run every rule group; the cell-bound ones only when outcome and layout name a cell."""
    find_and_size(ctx)
    target_power(ctx)
    margin_aims(ctx)
    estimation(ctx)
    if ctx.design is None:
        return
    directionless(ctx)
    allocation(ctx)
    cell_fields(ctx)
    analysis_and_method(ctx)
    simulation(ctx)
    interim(ctx)
    if ctx.cell is not None and not ctx.cell.errors:
        effect_against_hypothesis(ctx)
        group_counts(ctx)
        direction(ctx)


# -- find, sample size, target power ------------------------------------------------------------


def find_and_size(ctx: Context) -> None:
    """The sample size is what find = sample_size solves: absent then, required otherwise."""
    find, raw = ctx.find, ctx.raw
    if find == "sample_size" and posted(raw, "sample_size"):
        ctx.add(
            "sample_size",
            "must be absent when find = sample_size (it is what is solved for); "
            f"got {show(raw['sample_size'])}",
        )
    if find in ("power", "effect", "precision") and not posted(raw, "sample_size"):
        ctx.add(
            "sample_size",
            f'is required when find = {find}: {{"per_group": [n, ...]}} or {{"total": N}}',
        )


def target_power(ctx: Context) -> None:
    """No target when power is solved for; a target above alpha otherwise."""
    if ctx.find == "power" and posted(ctx.raw, "target_power"):
        ctx.add(
            "target_power",
            "is not used when find = power (power is what is solved for); "
            f"got {show(ctx.raw['target_power'])}",
        )
    alpha, target = ctx.data.get("alpha"), ctx.data.get("target_power")
    if alpha is None and ctx.aim is not None:
        alpha = resolve.default_alpha(ctx.aim, ctx.design)
    if alpha is not None and target is not None and not target > alpha:
        ctx.add(
            "target_power", f"must be in (alpha, 1) = ({number_text(alpha)}, 1); got {show(target)}"
        )


# -- the hypothesis -----------------------------------------------------------------------------


def margin_aims(ctx: Context) -> None:
    """Noninferiority and equivalence are one-sided, and offered only where an analysis aims so."""
    aim = ctx.aim
    if aim == "superiority" and ctx.design is not None and aim not in ctx.design.aims():
        # a cell that answers precision questions only (diagnostic × single_group)
        ctx.add(
            "hypothesis.aim",
            f'"{ctx.design.cell}" answers only {", ".join(ctx.design.aims())} questions; set '
            f'hypothesis.aim to {" or ".join(ctx.design.aims())}; got "{aim}"',
        )
        return
    if aim in (None, "superiority"):
        return
    if aim != "estimation" and ctx.data.get("alternative") == "two-sided":
        ctx.add(
            "alternative",
            f'must be "one-sided" for {aim} (one-sided by construction); got "two-sided"',
        )
    if ctx.design is None:
        return
    if aim not in ctx.design.aims():
        offering = [f'"{d.cell}"' for d in cells() if aim in d.aims()]
        ctx.add(
            "hypothesis.aim",
            f"{aim} is offered only for {', '.join(offering) or 'no cell'}; "
            f'got "{aim}" with "{ctx.design.cell}"',
        )
    margin = (ctx.data.get("hypothesis") or {}).get("margin")
    solved = {f.name: f for f in ctx.design.fields}.get(ctx.design.solved)
    # a ratio scale (binary × two_groups, analysis_options.scale) takes a log-ratio margin
    # analysis_options is checked against the cell's fields elsewhere; here it may be anything
    options = ctx.data.get("analysis_options")
    scale = options.get("scale", "difference") if isinstance(options, Mapping) else None
    on_difference = scale in (None, "difference")
    if (
        margin is not None
        and on_difference
        and getattr(solved, "unit", None) == "proportion"
        and not abs(margin) < 1
    ):
        ctx.add(
            "hypothesis.margin",
            f"must be in (-1, 1) for {ctx.design.cell} (a difference of proportions); "
            f"got {show(margin)}",
        )


def estimation(ctx: Context) -> None:
    """A precision question (aim estimation) asks for an interval's n or half-width: no test
    level, power, one-sided alternative, simulation, clustering or interim analyses."""
    raw, find = ctx.raw, ctx.find
    if ctx.aim != "estimation":
        if find == "precision":
            ctx.add(
                "find",
                'precision applies only when hypothesis.aim is "estimation" (the half-width of '
                'a confidence interval); got "precision"',
            )
        return
    if find in ("power", "effect"):
        ctx.add(
            "find",
            'must be "sample_size" (the n whose interval is narrow enough) or "precision" (the '
            f'half-width a given n achieves) when hypothesis.aim is estimation; got "{find}"',
        )
    hyp = raw.get("hypothesis") if isinstance(raw.get("hypothesis"), Mapping) else {}
    if find == "precision" and posted(hyp, "half_width"):
        ctx.add(
            "hypothesis.half_width",
            "is what find = precision solves for; remove it (or ask find = sample_size); "
            f"got {show(hyp['half_width'])}",
        )
    if find in (None, "sample_size") and not posted(hyp, "half_width"):
        ctx.add(
            "hypothesis.half_width",
            "is required when hypothesis.aim is estimation and find = sample_size: a number > 0, "
            "the largest acceptable half-width of the interval on the estimand's own scale",
        )
    for name in ("alpha", "target_power"):
        if posted(raw, name):
            ctx.add(
                name,
                "is not used when hypothesis.aim is estimation: the interval's level is "
                "hypothesis.confidence (default 0.95) and the chance of reaching the half-width "
                f"is hypothesis.assurance; remove it; got {show(raw[name])}",
            )
    if ctx.data.get("alternative") == "one-sided":
        ctx.add(
            "alternative",
            'must be "two-sided" when hypothesis.aim is estimation (the interval is two-sided; '
            'its level is hypothesis.confidence); got "one-sided"',
        )
    if raw.get("method") == "simulation":
        ctx.add(
            "method",
            'must be "analytic" when hypothesis.aim is estimation (precision is answered by '
            'formula); got "simulation"',
        )
    adjustments = raw.get("adjustments") if isinstance(raw.get("adjustments"), Mapping) else {}
    if posted(adjustments, "cluster"):
        ctx.add(
            "adjustments.cluster",
            "is not offered when hypothesis.aim is estimation (the intervals assume independent "
            "subjects); remove it",
        )
    comparisons = adjustments.get("comparisons")
    if isinstance(comparisons, int) and not isinstance(comparisons, bool) and comparisons > 1:
        ctx.add(
            "adjustments.comparisons",
            "must be 1 when hypothesis.aim is estimation (one interval is planned; for several, "
            f"raise hypothesis.confidence to 1 - (1 - confidence)/k); got {comparisons}",
        )
    for name, why in (
        ("interim", "an estimation question plans a single analysis"),
        (
            "assurance",
            "for an interval, hypothesis.assurance is the probability of reaching the half-width",
        ),
    ):
        if posted(raw, name):
            ctx.add(name, f"is not offered when hypothesis.aim is estimation ({why}); remove it")
    design = ctx.design
    assurance = hyp.get("assurance")
    if design is not None and assurance is not None and design.estimation is not None:
        if not design.estimation.assurance:
            ctx.add(
                "hypothesis.assurance",
                f'is not offered for "{design.cell}" (its interval is planned at the expected '
                f"half-width); remove it; got {show(assurance)}",
            )


def directionless(ctx: Context) -> None:
    """A cell whose tests have no direction (an F test) takes no one-sided alternative."""
    if ctx.data.get("alternative") == "one-sided" and not getattr(ctx.design, "directional", True):
        ctx.add(
            "alternative",
            f'must be "two-sided" for {ctx.design.cell}: its tests have no direction (they '
            'reject for large statistics only); got "one-sided"',
        )
    if ctx.data.get("alternative") == "two-sided" and getattr(ctx.design, "one_sided_only", False):
        ctx.add(
            "alternative",
            f'must be "one-sided" for {ctx.design.cell}: its design tests in one direction by '
            'construction (the default); got "two-sided"',
        )


# -- allocation ---------------------------------------------------------------------------------


def allocation(ctx: Context) -> None:
    """A ratio only where groups are sized by one; exact-ratio rounding only where it can hold."""
    design, raw, data = ctx.design, ctx.raw, ctx.data
    # 1 is accepted everywhere so a normalized question loads again unchanged.
    if posted(raw, "allocation_ratio") and not takes_ratio(design) and raw["allocation_ratio"] != 1:
        ctx.add(
            "allocation_ratio",
            f"applies only to two-group layouts; got {show(raw['allocation_ratio'])} for "
            f'"{design.cell}"',
        )
    if data.get("allocation_rounding") != "exact_ratio":
        return
    why = None
    if not takes_ratio(design):
        why = "applies only to two-group layouts"
    elif ctx.find != "sample_size":
        why = "applies only when find = sample_size (the enrolled numbers are given)"
    elif raw.get("method") == "simulation":
        why = "is offered for analytic answers; a simulated search sizes the groups itself (use each_group)"
    elif (data.get("adjustments") or {}).get("cluster") is not None:
        why = (
            "is not offered with a cluster block: clusters are enrolled whole, each group "
            "rounded to whole clusters (use each_group)"
        )
    elif (
        data.get("allocation_ratio") is not None
        and ratio_fraction(data["allocation_ratio"]) is None
    ):
        why = (
            "needs an allocation_ratio that is a fraction with denominator at most 100 "
            f"(e.g. 3 or 1.5); got allocation_ratio {show(data['allocation_ratio'])}"
        )
    if why:
        ctx.add("allocation_rounding", f'{why}; got "exact_ratio"')


# -- the cell's fields, the analysis and the method ---------------------------------------------


def cell_fields(ctx: Context) -> None:
    """effect, assumptions and analysis_options against the cell's declared fields."""
    find = ctx.find or "sample_size"
    cell = Cell(ctx.design, ctx.raw, find, resolve.from_data(ctx.raw, find))
    cell.check()
    ctx.cell = cell
    for where, messages in cell.errors.items():
        for message in messages:
            ctx.add(where, message)


def analysis_and_method(ctx: Context) -> None:
    """The analysis is one of the cell's, offered by the method and for the aim."""
    design, asked = ctx.design, ctx.data.get("analysis")
    names = [a.name for a in design.analyses]
    if asked is not None and asked not in names:
        ctx.add("analysis", f'must be one of {", ".join(names)} for "{design.cell}"; {got(asked)}')
        return
    if "method" not in ctx.data and posted(ctx.raw, "method"):
        return  # the method failed its own check
    method = resolve.method(design, ctx.data, ctx.raw)
    if asked is not None:
        _asked_analysis_fits(ctx, design.analysis(asked), method)
    elif ctx.aim is not None and ctx.cell is not None and not ctx.cell.errors:
        if resolve.analysis(design, method, ctx.aim, _blocks(ctx), ctx.data) is None:
            offered = design.analyses_for(method)
            ctx.add(
                "method",
                f'{method} answers no {ctx.aim} question for "{design.cell}"'
                + (f" (it offers {', '.join(offered)})" if offered else "")
                + f"; got {show(method)}",
            )


def _asked_analysis_fits(ctx: Context, chosen: Any, method: str) -> None:
    """A posted analysis must be honored by the method and answer the aim."""
    design = ctx.design
    if method not in chosen.methods:
        offered = design.analyses_for(method)
        ctx.add(
            "analysis",
            f'{chosen.name} is not offered by the {method} method for "{design.cell}"; '
            f"{method} offers {', '.join(offered) or 'no analysis'} there "
            f"({chosen.name}: {' and '.join(chosen.methods)} only); got {show(chosen.name)}",
        )
    elif ctx.aim is not None and ctx.aim not in chosen.aims:
        fitting = design.analyses_for(method, ctx.aim)
        ctx.add(
            "analysis",
            f"{chosen.name} answers {' and '.join(chosen.aims)} only; for {ctx.aim} use one of "
            f"{', '.join(fitting) or 'none'}; got {show(chosen.name)}",
        )


def _partial(ctx: Context) -> dict:
    """The question as normalization would give it (called once the cell's fields hold).

    Built on the first call and shared by the rules after it, which only read it: nothing
    it depends on (the posted and loaded data, the checked cell) changes during the checks.
    """
    if ctx.partial is None:
        ctx.partial = resolve.normalize(ctx.design, ctx.data, ctx.raw, _blocks(ctx))
    return ctx.partial


def _blocks(ctx: Context) -> dict:
    return ctx.cell.blocks() if ctx.cell is not None and not ctx.cell.errors else {}


def simulation(ctx: Context) -> None:
    """The simulation block belongs to method = simulation; its data model to find != effect."""
    raw = ctx.raw
    sim_data = (ctx.data.get("simulation") or {}).get("data")
    method_valid = "method" in ctx.data or not posted(raw, "method")
    method = resolve.method(ctx.design, ctx.data, raw) if method_valid else None
    if method == "analytic" and posted(raw, "simulation"):
        ctx.add(
            "simulation", 'is given but method is analytic; set method to "simulation" or remove it'
        )
    if ctx.find == "effect" and method == "simulation" and sim_data is not None:
        # The search moves the solved field in data built from the effect and assumptions.
        keys = (
            f" with keys {', '.join(map(str, sim_data))}" if isinstance(sim_data, Mapping) else ""
        )
        ctx.add(
            "simulation.data",
            "is not accepted for find = effect: a posted data model has no single effect "
            "parameter to move; remove simulation.data (the data are drawn from the effect and "
            "assumptions) or ask find = power for each candidate data model; got a data model"
            + keys,
        )


# -- rules that need the whole checked cell ------------------------------------------------------


def effect_against_hypothesis(ctx: Context) -> None:
    """Solving for n needs an effect off the null, and inside the margin for NI/equivalence."""
    if ctx.find != "sample_size" or ctx.aim is None:
        return
    q = _partial(ctx)
    effect = resolve.assumed_effect(ctx.design, q)
    if effect is None:
        return
    solved = ctx.design.solved
    block = {f.name: f.block for f in ctx.design.fields}[solved]
    value = (q.get(block) or {}).get(solved)
    if value is None:  # another effect form was posted (an odds ratio, group means): name it
        for f in ctx.design.fields:
            posted = (q.get(f.block) or {}).get(f.name)
            if f.block == "effect" and posted is not None:
                solved, block, value = f.name, f.block, posted
                break
    margin = (q["hypothesis"] or {}).get("margin")
    if ctx.aim == "superiority":
        if effect == 0:
            null = ctx.design.null_effect(q)
            shown = "its value under the null hypothesis" if null is None else number_text(null)
            ctx.add(
                f"{block}.{solved}",
                f"must differ from {shown} (the null value) when solving for the sample size "
                f"(no effect to detect); got {show(value)}",
            )
        return
    if margin is None or ctx.design.margin_on_effect:  # the design checks its own scale
        return
    if ctx.aim == "noninferiority":
        better = q["hypothesis"].get("higher_is_better", True)
        if not (effect > margin if better else effect < margin):
            side = "above" if better else "below"
            ctx.add(
                f"{block}.{solved}",
                f"the assumed effect ({number_text(effect)}) must be {side} the noninferiority "
                f"margin {number_text(margin)} when solving for the sample size; got {show(value)}",
            )
    elif not abs(effect) < margin:
        ctx.add(
            f"{block}.{solved}",
            f"the assumed effect ({number_text(effect)}) must be inside (-{number_text(margin)}, "
            f"{number_text(margin)}) when solving for the sample size of an equivalence "
            f"question; got {show(value)}",
        )


def group_counts(ctx: Context) -> None:
    """per_group lists one number per group; a total splits into groups of at least 2."""
    q = _partial(ctx)
    groups = resolve.group_count(ctx.design, q)
    size = ctx.data.get("sample_size")
    if groups is None:
        return
    if size is not None and size.get("per_group") is not None and len(size["per_group"]) != groups:
        ctx.add(
            "sample_size.per_group",
            f"must list {groups} number(s), one per group (control first); "
            f"got {len(size['per_group'])}: {show(size['per_group'])}",
        )
    if size is not None and size.get("total") is not None:
        split = split_total(size["total"], ctx.design.allocation(q))
        if min(split) < 2:
            ctx.add(
                "sample_size.total",
                f"splits into {split} by the allocation; every group needs at least 2; "
                f"got {size['total']}",
            )
    sim_data = (ctx.data.get("simulation") or {}).get("data")
    if (
        data_keys(ctx.design) == ("groups",)
        and isinstance(sim_data, Mapping)
        and "groups" in sim_data
    ):
        if len(sim_data["groups"]) != groups:
            ctx.add(
                "simulation.data.groups",
                f"must list {groups} distributions, one per group; got {len(sim_data['groups'])}",
            )


def interim(ctx: Context) -> None:
    """An interim block needs a cell with a sequential test, the analytic method, one-sided
    futility; the engine's own rule (designs/interim.refusal) decides, named by field."""
    block = ctx.data.get("interim")
    if not block or ctx.aim is None:
        return
    aim = ctx.aim
    q = {
        "interim": block,
        "method": resolve.method(ctx.design, ctx.data, ctx.raw),
        "analysis": ctx.data.get("analysis"),
        "adjustments": ctx.data.get("adjustments"),
        "hypothesis": {"aim": aim},
        "alternative": ctx.data.get("alternative")
        or ("two-sided" if aim == "superiority" else "one-sided"),
    }
    why = interim_rules.refusal(ctx.design, q)
    if why:
        ctx.add(*why)


def direction(ctx: Context) -> None:
    """A posted higher_is_better must agree with the effect of a one-sided superiority question."""
    if ctx.aim != "superiority" or not posted(ctx.raw.get("hypothesis"), "higher_is_better"):
        return
    why = resolve.direction_conflict(ctx.design, _partial(ctx))
    if why:
        ctx.add("hypothesis.higher_is_better", why)
