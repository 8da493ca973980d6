"""Real result records for the report tests, computed once per session by the engine."""

import pytest
from reports_testkit import D_HALF, SURVIVAL

from service.engine import compute
from tests.engine.questions import make_q


@pytest.fixture(scope="session")
def analytic_record() -> dict:
    """Two means, d = 0.5, Bonferroni over 2, clusters of 20 with ICC 0.05, 20% dropout."""
    return compute(
        make_q(
            "two_means",
            effect=D_HALF,
            adjustments={
                "dropout": 0.2,
                "cluster": {"mean_size": 20, "icc": 0.05},
                "comparisons": 2,
            },
        )
    )


@pytest.fixture(scope="session")
def simulated_record() -> dict:
    """Two means, d = 0.5, solved by simulation (2,000 replicates) with 10% dropout."""
    return compute(
        make_q(
            "two_means",
            effect=D_HALF,
            method="simulation",
            adjustments={"dropout": 0.1},
            simulation={"replicates": 2000, "search_replicates": 1000},
        )
    )


@pytest.fixture(scope="session")
def simulated_power_record() -> dict:
    """Two means, d = 0.5, power at 30 per group by simulation (2,000 replicates)."""
    return compute(
        make_q(
            "two_means",
            effect=D_HALF,
            per_arm=[30, 30],
            method="simulation",
            simulation={"replicates": 2000},
        )
    )


@pytest.fixture(scope="session")
def survival_record() -> dict:
    """Log-rank, HR 0.75, control median 12, accrual 24, follow-up 12 (Schoenfeld events)."""
    return compute(make_q("survival_logrank", effect=SURVIVAL))
