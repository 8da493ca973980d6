"""Real result records for the report tests, computed once per session by the engine."""

import pytest
from reports_testkit import SURVIVAL, answer


@pytest.fixture(scope="session")
def analytic_record() -> dict:
    """Two groups, d = 0.5, Bonferroni over 2, clusters of 20 with ICC 0.05, 20% dropout."""
    return answer(
        adjustments={
            "dropout": 0.2,
            "cluster": {"mean_size": 20, "icc": 0.05},
            "comparisons": 2,
        }
    )


@pytest.fixture(scope="session")
def simulated_record() -> dict:
    """Two groups, d = 0.5, solved by simulation (2,000 replicates) with 10% dropout."""
    return answer(
        method="simulation",
        adjustments={"dropout": 0.1},
        simulation={"replicates": 2000, "search_replicates": 1000, "seed": 20261201},
    )


@pytest.fixture(scope="session")
def simulated_power_record() -> dict:
    """Two groups, d = 0.5, power at 30 per group by simulation (2,000 replicates)."""
    return answer(
        find="power",
        sample_size={"per_group": [30, 30]},
        method="simulation",
        simulation={"replicates": 2000, "seed": 20261201},
    )


@pytest.fixture(scope="session")
def survival_record() -> dict:
    """Log-rank, HR 0.75, control median 12 months, accrual 24, follow-up 12 (Schoenfeld)."""
    return answer(**SURVIVAL)
