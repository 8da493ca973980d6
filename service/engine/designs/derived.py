"""Words for the quantities the designs derive (``derive(q)``, the record's ``method.derived``).

A derived key that is one of its cell's declared fields (``sd_difference``, ``control_hazard``)
prints with that field's label; every other key any design returns is named here, once for all
cells: a key means the same quantity wherever it is derived. The report's method note reads this
table (``service/reports/describe.derived_text``); a new derived key gets its label here.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["DERIVED", "Quantity"]


@dataclass(frozen=True)
class Quantity:
    """A derived quantity's label in prose and its unit (a ``Field`` unit: "time units" prints
    with the question's time unit; "" for none)."""

    label: str
    unit: str = ""


DERIVED = {
    # treatments against a shared control
    "comparison_correlation": Quantity("correlation between any two treatment-control comparisons"),
    # event counts
    "log_rate_ratio": Quantity("natural log of the rate ratio"),
    "mean_follow_up": Quantity("mean follow-up", "time units"),
    "follow_up_spread": Quantity("mean squared follow-up over the squared mean follow-up"),
    "events_per_subject_control": Quantity("expected events per participant in the control group"),
    "events_per_subject_treatment": Quantity(
        "expected events per participant in the treatment group"
    ),
    # repeated measures
    "variance_factor": Quantity(
        "variance factor u (a group's estimate from n participants has variance u·SD²/n)"
    ),
    "completers": Quantity("proportion of participants attending every visit"),
    # lognormal outcomes
    "sd_within_log": Quantity("within-subject SD on the log scale"),
    "sd_log": Quantity("SD on the log scale"),
    "log_ratio": Quantity("natural log of the ratio"),
    # continuous × two groups
    "design_factor": Quantity("variance factor of the baseline adjustment (1 − correlation²)"),
    "prob_superiority": Quantity("probability that a treatment value exceeds a control value"),
    # diagnostic accuracy (Buderer)
    "cases_needed": Quantity("cases (with the condition) needed for the sensitivity interval"),
    "non_cases_needed": Quantity(
        "non-cases (without the condition) needed for the specificity interval"
    ),
    "subjects_for_sensitivity": Quantity("participants needed for the sensitivity interval"),
    "subjects_for_specificity": Quantity("participants needed for the specificity interval"),
    "governed_by": Quantity("the size is set by the interval for"),
    "binormal_separation": Quantity(
        "separation of the cases' and controls' mean scores in SDs (binormal)"
    ),
    # regression
    "variance_inflation": Quantity("variance inflation from the other covariates"),
    "event_rate_with_factor": Quantity("event rate with the factor present"),
    "overall_event_rate": Quantity("event rate averaged over the covariate groups"),
    "full_model_r_squared": Quantity("R² of the full model"),
    "covariate_variance": Quantity("variance of the covariate"),
    # a posted two-stage design (find = power)
    "design_n1": Quantity("stage 1 size"),
    "design_r1": Quantity("stage 1 stopping bound"),
    "design_n": Quantity("total size"),
    "design_r": Quantity("final bound"),
    "design_type_i_error": Quantity("exact type I error"),
    "design_power": Quantity("exact power"),
    "design_pet_null": Quantity(
        "probability of stopping after stage 1 at the uninteresting response rate"
    ),
    "design_expected_n_null": Quantity("expected size at the uninteresting response rate"),
    "design_pet_alternative": Quantity(
        "probability of stopping after stage 1 at the response rate worth pursuing"
    ),
    "design_expected_n_alternative": Quantity("expected size at the response rate worth pursuing"),
}
