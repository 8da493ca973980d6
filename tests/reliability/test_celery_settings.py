"""Each queue-safety setting of the issue, asserted by name on the built Celery app (Celery 5.5+)."""

from __future__ import annotations

import pytest

from service.config import load_config
from workers.celery_app import celery_settings, make_celery
from workers.queue import PUBLISH_RETRY_POLICY

REDIS = "redis://127.0.0.1:6379/9"  # never contacted: building the app does not connect


@pytest.fixture
def conf():
    return make_celery(load_config({"BROKER_URL": REDIS})).conf


def test_every_queue_safety_setting_is_set_on_the_app(conf):
    assert conf.task_acks_late is True
    assert conf.task_reject_on_worker_lost is True
    assert conf.worker_prefetch_multiplier == 1
    assert conf.worker_cancel_long_running_tasks_on_connection_loss is True
    assert conf.task_ignore_result is True
    assert conf.task_serializer == "json" and conf.result_serializer == "json"
    assert conf.accept_content == ["json"] and conf.event_serializer == "json"
    visibility = conf.broker_transport_options["visibility_timeout"]
    # Longer than the longest job: the hard time limit stops a task before Redis redelivers it.
    assert conf.task_soft_time_limit < conf.task_time_limit < visibility


def test_publishing_gives_up_after_a_bounded_number_of_quick_retries(conf):
    for policy in (conf.task_publish_retry_policy, PUBLISH_RETRY_POLICY):
        assert 0 < policy["max_retries"] <= 5
        worst = sum(
            min(policy["interval_start"] + i * policy["interval_step"], policy["interval_max"])
            for i in range(policy["max_retries"])
        )
        assert worst < 10  # seconds of back-off at most, so the API never hangs on the broker
    options = conf.broker_transport_options
    assert options["socket_connect_timeout"] <= 5 and options["socket_timeout"] <= 15


def test_visibility_timeout_is_the_same_in_the_transport_options_and_the_app():
    settings = celery_settings(load_config({"BROKER_URL": REDIS}))
    visibility = settings["broker_transport_options"]["visibility_timeout"]
    assert settings.get("visibility_timeout") == visibility
    assert settings["result_backend_transport_options"]["visibility_timeout"] == visibility
