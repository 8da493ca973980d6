"""The Celery settings: one dict derived from the service config, safe for long idempotent jobs."""

from __future__ import annotations

from service.config import load_config
from workers.celery_app import TASK_NAMES, celery_settings, make_celery


def test_settings_are_json_only_late_ack_and_bounded(tmp_path):
    config = load_config({"BROKER_URL": "redis://127.0.0.1:6379/9"})
    s = celery_settings(config)
    assert s["task_serializer"] == "json" and s["result_serializer"] == "json"
    assert s["accept_content"] == ["json"]
    assert s["task_ignore_result"] is True  # the database is the source of truth
    assert s["task_acks_late"] is True and s["task_reject_on_worker_lost"] is True
    assert s["worker_prefetch_multiplier"] == 1
    assert s["worker_cancel_long_running_tasks_on_connection_loss"] is True
    assert s["broker_connection_retry_on_startup"] is True
    assert s["task_publish_retry"] is True
    assert 0 < s["task_publish_retry_policy"]["max_retries"] <= 5
    visibility = config["VISIBILITY_TIMEOUT"]
    assert s["broker_transport_options"]["visibility_timeout"] == visibility
    assert s["result_backend_transport_options"]["visibility_timeout"] == visibility
    # A running task must never outlive the visibility timeout (Redis would redeliver it).
    assert s["task_soft_time_limit"] < s["task_time_limit"] < visibility


def test_time_limit_is_clamped_below_a_short_visibility_timeout():
    config = load_config(
        {
            "BROKER_URL": "redis://127.0.0.1:6379/9",
            "VISIBILITY_TIMEOUT": 600,
            "TASK_TIME_LIMIT": 3600,
        }
    )
    s = celery_settings(config)
    assert s["task_soft_time_limit"] < s["task_time_limit"] < 600


def test_filesystem_broker_folders_live_under_the_configured_root(tmp_path):
    config = load_config({"BROKER_URL": f"filesystem://{tmp_path / 'b'}"})
    options = celery_settings(config)["broker_transport_options"]
    for key in ("data_folder_in", "data_folder_out", "processed_folder", "control_folder"):
        assert options[key].startswith(str(tmp_path / "b")), key
        assert (tmp_path / "b").is_dir()
    # Producer and consumer must share one folder or messages never arrive.
    assert options["data_folder_in"] == options["data_folder_out"]


def test_tasks_are_registered_under_namespaced_names(tmp_path):
    import workers.exploration_tasks  # noqa: F401  (the worker imports them through ``include``)
    from workers.celery_app import app

    for name in TASK_NAMES.values():
        assert name.startswith("sizewise.")
        assert name in app.tasks
    built = make_celery(load_config({"BROKER_URL": f"filesystem://{tmp_path}"}))
    assert built.conf.task_acks_late is True
    assert built.conf.sizewise["BROKER_URL"] == f"filesystem://{tmp_path}"
