"""The generic renderer: every design word the report prints comes from the design object.

The report never names a design. It looks up the cell (``outcome`` × ``layout``) in the engine's
registry and reads the cell's label, its analyses' labels, its field labels and units, and its
``Phrases`` (``effect(q, record)``, ``assumptions(q)``). A design registered without phrases
gets sentences built from its field declarations ("standard deviation 12"), so a newly
registered design renders without any edit here.
"""

from __future__ import annotations

from service.engine import QuestionError, designs
from service.engine.designs.derived import DERIVED

__all__ = [
    "analysis_label",
    "assumed_text",
    "assumptions_text",
    "cell",
    "cell_label",
    "derived_text",
    "effect_text",
    "fmt_count",
    "fmt_num",
    "fmt_pct",
    "fmt_power",
    "fmt_prob",
    "field_label",
    "group_count",
    "group_names",
    "is_omnibus",
    "label_of_analysis",
    "path_label",
    "size_search",
    "unit_words",
]

# The assumption that names the unit of every time field (VOCAB §3); it is printed with them.
TIME_UNIT = "time_unit"

# --- number formats (public so tests format the record the same way) ------------------------


def fmt_num(x: float) -> str:
    """Format an entered value compactly with up to 6 significant digits (0.5, 12, 0.0578)."""
    return f"{float(x):g}"


def fmt_count(n: float) -> str:
    """Format a whole count with a thousands separator (1,016)."""
    return f"{int(n):,}"


def fmt_prob(p: float, digits: int = 3) -> str:
    """Format a probability that is not a power (a type I error) as a decimal (0.0512)."""
    return f"{float(p):.{digits}f}"


def fmt_pct(p: float) -> str:
    """Format an entered proportion as a percentage without trailing zeros (0.8 → 80%)."""
    return f"{100 * float(p):.4g}%"


def fmt_power(p: float) -> str:
    """Format a computed power (analytic or simulated, and its interval ends): 0.9026 → 90.3%."""
    return f"{100 * float(p):.1f}%"


# --- the design object --------------------------------------------------------------------------


def cell(q: dict):
    """Return the design object of the question's cell (ValueError naming the field if unknown)."""
    try:
        return designs.get(q.get("outcome"), q.get("layout"))
    except QuestionError as exc:
        raise ValueError(f"question.{exc.field}: {exc.message}") from exc


def cell_label(q: dict) -> str:
    """'Continuous outcome, two groups'."""
    return cell(q).label


def _analysis(q: dict, record: dict | None = None):
    design = cell(q)
    name = ((record or {}).get("method") or {}).get("analysis") or q.get("analysis")
    if not name:
        name = design.default_analysis(q)
    return next((a for a in design.analyses if a.name == name), None)  # None: not offered


def analysis_label(q: dict, record: dict | None = None) -> str:
    """'Welch's t test': the record's own label first, else the design's declaration."""
    label = ((record or {}).get("method") or {}).get("analysis_label")
    if label:
        return label
    analysis = _analysis(q, record)
    return analysis.label if analysis is not None else "the planned test"


def size_search(record: dict) -> str | None:
    """How an exact search found the analytic base size ("found by exact search: the smallest
    n …"), or None when a formula gave an unrounded size (or the answer was simulated)."""
    if (record.get("method") or {}).get("method") == "simulation":
        return None
    analysis = _analysis(record["question"], record)
    words = getattr(analysis, "size_search", None)
    return f"found by exact search: {words}" if words else None


def analytic_words(record: dict) -> str:
    """What the analytic answer beside a simulation is: an exact enumeration for an analysis
    whose sizes come from an exact search, else a formula."""
    analysis = _analysis(record["question"], record)
    return "exact enumeration" if getattr(analysis, "size_search", None) else "analytic formula"


def _fields(design) -> dict:
    return {f.name: f for f in design.fields}


def field_label(q: dict, name: str) -> str:
    """The declared human label of one of the cell's fields ('standard deviation')."""
    found = _fields(cell(q)).get(name)
    return found.label if found is not None else name.replace("_", " ")


def _time_unit(q: dict) -> str | None:
    return (q.get("assumptions") or {}).get(TIME_UNIT)


def _value_text(q: dict, f, value) -> str:
    """One value with its unit: '24 months', '1 year', '0.05 per month', '10, 12 and 15'."""
    if isinstance(value, (list, tuple)):
        items = [fmt_num(v) for v in value]
        text = ", ".join(items[:-1]) + " and " + items[-1] if len(items) > 1 else "".join(items)
    else:
        text = fmt_num(value)
    unit = _time_unit(q)
    if f.unit == "time units" and unit:
        return f"{text} {unit.removesuffix('s') if text == '1' else unit}"  # "1 year"
    if f.unit == "per time unit" and unit:
        return f"{text} per {unit.removesuffix('s')}"
    return text


def _generic(q: dict, block: str) -> str:
    """A sentence from the field declarations: 'a standard deviation of 12 and …'."""
    values = q.get(block) or {}
    parts = []
    for f in cell(q).fields:
        value = values.get(f.name)
        if f.block != block or f.name == TIME_UNIT or value is None:
            continue
        if f.type == "boolean":
            if value:
                parts.append(f"with {f.label}")
            continue
        if f.type == "choice":
            parts.append(f"{f.label} {str(value).replace('_', ' ')}")
            continue
        parts.append(f"{f.label} {_value_text(q, f, value)}")
    if not parts:
        return ""
    return ", ".join(parts[:-1]) + " and " + parts[-1] if len(parts) > 1 else parts[0]


def effect_text(q: dict, record: dict | None = None) -> str:
    """The effect to detect, as entered ('a mean difference of -5 …')."""
    phrases = cell(q).phrases
    return phrases.effect(q, record) if phrases is not None else _generic(q, "effect")


def assumptions_text(q: dict) -> str:
    """What the study assumes, as entered ('SD 8 and correlation 0.6'), with its time unit."""
    phrases = cell(q).phrases
    return phrases.assumptions(q) if phrases is not None else _generic(q, "assumptions")


def margin_text(q: dict) -> str | None:
    """The hypothesis margin in the cell's own words, or None (then the number is printed)."""
    phrases = cell(q).phrases
    margin = getattr(phrases, "margin", None)
    return margin(q) if margin is not None else None


def assumed_text(q: dict, record: dict | None = None, *, effect: bool = True) -> str:
    """The effect and the assumptions in one phrase, as the investigator entered them."""
    parts = [t for t in (effect_text(q, record) if effect else "", assumptions_text(q)) if t]
    return " with ".join(parts) if parts else "the stated assumptions"


def derived_text(q: dict, record: dict) -> str:
    """The values derived for the calculation ('standard deviation of the differences 7.16')."""
    derived = (record.get("method") or {}).get("derived") or {}
    if not derived:
        return ""
    declared = _fields(cell(q))
    parts = []
    for name, value in derived.items():
        # the cell's own field, else the one table of derived quantities; a key in neither
        # (a design registered elsewhere) is shown as its words
        f = declared.get(name) or DERIVED.get(name)
        label = f.label if f is not None else name.replace("_", " ")
        if f is not None and not isinstance(value, (dict, str)):
            parts.append(f"{label} {_value_text(q, f, value)}")
        elif isinstance(value, (int, float)):
            parts.append(f"{label} {fmt_num(value)}")
        else:
            parts.append(f"{label} {value}")
    return "; ".join(parts)


def unit_words(q: dict) -> tuple[str, str]:
    """What one enrolled unit is called: pairs in a paired layout, participants otherwise."""
    return ("pair", "pairs") if q.get("layout") == "paired" else ("participant", "participants")


def group_count(q: dict) -> int:
    return int(cell(q).groups(q))


def group_names(q: dict, k: int) -> list[str]:
    """The cell's own names when it has them; control and treatment for two groups, numbered
    groups beyond."""
    named = cell(q).phrases.group_names
    if named is not None:
        return named(q)
    if k == 2:
        return ["control", "treatment"]
    return [f"group {i + 1}" for i in range(k)]


def is_omnibus(q: dict) -> bool:
    """A cell whose tests have no direction (the F test): 'two-sided' would misdescribe it."""
    return not cell(q).directional


def label_of_analysis(q: dict, name: str | None) -> str:
    """The label of a named analysis of the question's cell ('Kruskal–Wallis test')."""
    if not name:
        return analysis_label(q)
    found = next((a for a in cell(q).analyses if a.name == name), None)
    return found.label if found is not None else "the planned test"


# Question paths that are not the cell's own fields: the same words for every design.
_PATH_WORDS = {
    "alpha": "alpha",
    "target_power": "target power",
    "allocation_ratio": "allocation ratio",
    "adjustments.dropout": "dropout",
    "adjustments.comparisons": "comparisons",
    "adjustments.cluster.icc": "ICC",
    "adjustments.cluster.mean_size": "cluster size",
    "adjustments.cluster.cv": "cluster-size CV",
    "adjustments.cluster.clusters_per_group": "clusters per group",
}
_FIELD_BLOCKS = ("effect", "assumptions", "analysis_options")


def path_label(q: dict | None, path: str) -> str:
    """Words for a dotted question path: 'assumptions.sd' → the cell's label for ``sd``."""
    if path in _PATH_WORDS:
        return _PATH_WORDS[path]
    block, _, name = path.partition(".")
    if q is not None and block in _FIELD_BLOCKS and name:
        return field_label(q, name)
    return path.rsplit(".", 1)[-1].replace("_", " ")
