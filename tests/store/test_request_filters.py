"""The request list filters by cell: the stored ``design`` column holds ``<outcome>/<layout>``.

Invented Northbridge General Hospital requests, submitted through the API.
"""

from __future__ import annotations

from service.store import requests as store
from service.store.db import session_scope
from service.store.models import Request


def test_a_stored_request_names_its_cell_and_the_list_filters_by_it(api):
    correlation = api.question_body(
        outcome="association", layout="single_group", effect={"r": 0.3}, assumptions={}
    )
    ids = {
        "means": api.submit(api.request_body()).get_json()["id"],
        "correlation": api.submit(api.request_body(correlation)).get_json()["id"],
    }
    with session_scope(api.sessions()) as session:
        assert session.get(Request, ids["means"]).design == "continuous/two_groups"

        def listed(**filters) -> set[str]:
            return {row.id for row in store.list_requests(session, **filters).items}

        assert listed(outcome="association") == {ids["correlation"]}
        assert listed(layout="two_groups") == {ids["means"]}
        assert listed(outcome="continuous", layout="single_group") == set()
        # LIKE wildcards in a filter value match nothing but themselves.
        assert listed(outcome="%") == set()
    history = api.client.get(f"/v1/requests/{ids['correlation']}").get_json()["history"]
    submitted = history[0]["detail"]
    assert (submitted["outcome"], submitted["layout"]) == ("association", "single_group")
