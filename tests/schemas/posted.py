"""Posted (raw) questions the schema tests share."""

# Log-rank with a control median of 12 months, accrual 24 and 12 more of follow-up
# (Lachin & Foulkes 1986).
SURV = {
    "outcome": "time_to_event",
    "layout": "two_groups",
    "effect": {"hazard_ratio": 0.75},
    "assumptions": {
        "time_unit": "months",
        "control_median": 12.0,
        "accrual": 24.0,
        "follow_up": 12.0,
    },
}
