"""Which way a one-sided test looks: one rule for the analytic designs and the simulations.

The direction is on the outcome scale: +1 when the alternative is "the treatment (or the sample,
or the correlation) is higher than under the null", −1 when it is lower. For time-to-event
outcomes "higher" means longer times to the event, i.e. a hazard ratio below 1.

* Superiority: the one-sided alternative points where the assumed effect points (a
  blood-pressure reduction, difference −5, is tested for a reduction). With no assumed effect
  (find = effect, or an effect exactly at the null) ``higher_is_better`` decides.
* Non-inferiority and equivalence: ``higher_is_better`` decides; the margin's sign is checked
  against it by the schema.

A posted ``higher_is_better`` that contradicts the assumed effect of a one-sided superiority
question is refused by the schema (``conflict``); when it is not posted, the normalized
question takes the effect's direction, so the record says which way the test looked.
"""

from __future__ import annotations

import math


def assumed_effect(q: dict, design) -> float | None:
    """Return the assumed effect minus its null value on the outcome scale, or None.

    For time to event the value is −ln(hazard ratio): positive when treatment times are longer.
    None when the cell has no direction (k groups) or the effect is not given (find = effect).
    """
    value = design.contrast(q)
    return float(value) if _number(value) else None


def _number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def _sign(x: float | None) -> int:
    return 0 if x is None or not math.isfinite(x) or x == 0 else (1 if x > 0 else -1)


def one_sided(q: dict, design, implied: float | None = None) -> int:
    """Return +1 or −1: the outcome direction the one-sided alternative points to.

    ``implied`` is the effect a posted data model implies (difference of arm means, minus the
    null value; survival: treatment minus control mean time); it replaces the effect fields.
    """
    h = q.get("hypothesis") or {}
    better = 1 if h.get("higher_is_better", True) else -1
    if h.get("aim", "superiority") != "superiority":
        return better
    effect = implied if implied is not None else assumed_effect(q, design)
    return _sign(effect) or better


def conflict(q: dict, design, implied: float | None = None) -> str | None:
    """Return why a posted higher_is_better contradicts the effect of a one-sided question.

    Only a one-sided superiority question with an assumed effect off its null can conflict.
    """
    h = q.get("hypothesis") or {}
    if h.get("aim", "superiority") != "superiority" or q.get("alternative") != "one-sided":
        return None
    effect = implied if implied is not None else assumed_effect(q, design)
    sign = _sign(effect)
    better = 1 if h.get("higher_is_better", True) else -1
    if sign == 0 or sign == better:
        return None
    where = "the data model" if implied is not None else f"effect.{design.solved}"
    if design.simulation is not None and design.simulation.direction_sign < 0:
        words = {
            1: "longer times to the event (hazard ratio below 1)",
            -1: "shorter times to the event (hazard ratio above 1)",
        }
    else:
        words = {1: "a higher value than under the null", -1: "a lower value than under the null"}
    return (
        f"is {'true' if better > 0 else 'false'}, so the one-sided test would look for "
        f"{words[better]}, but the assumed effect ({where}) points to {words[sign]}: that "
        f"test could not detect it. Set higher_is_better to {'false' if better > 0 else 'true'} "
        "if that direction is the benefit, correct the effect, or use a two-sided alternative"
    )


def implied(design, arms: list[dict]) -> float | None:
    """Return the effect simulated groups imply on the outcome scale, or None.

    Two groups: treatment minus control mean (location when the mean does not exist; for event
    times, the mean time, so longer times count as higher). One group: its mean (the null is 0).
    """
    model = design.simulation
    if model is None or model.implied_contrast is None:
        return None
    try:
        value = model.implied_contrast(arms)
    except (ArithmeticError, IndexError):  # a mean beyond a float: the effect fields decide
        return None
    return value if value is not None and math.isfinite(value) else None
