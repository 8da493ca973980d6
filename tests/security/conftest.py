"""Security test fixtures shared by the budget and rate-limit tests."""

from __future__ import annotations

import pytest

from service import create_app


@pytest.fixture
def make_app(settings):
    """Build an app on the test database with extra settings."""
    made = []

    def build(**extra):
        application = create_app(dict(settings, **extra))
        made.append(application)
        return application

    yield build
    for application in made:
        application.extensions["sizewise"]["engine"].dispose()
