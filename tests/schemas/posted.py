"""Posted (raw) questions the schema tests share."""

# Log-rank with a control median of 12, accrual 24 and 12 more of follow-up (Lachin & Foulkes 1986).
SURV = {
    "design": "survival_logrank",
    "effect": {
        "hazard_ratio": 0.75,
        "median_control": 12.0,
        "accrual_period": 24.0,
        "follow_up": 12.0,
    },
}
