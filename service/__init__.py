"""sizewise: sample-size and power answers for study protocols."""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:  # Flask is imported inside the factory so `import service.engine` stays pure
    from flask import Flask


def create_app(config: dict | None = None) -> Flask:
    """Create the Flask application: settings, database engine, blueprints and error handlers."""
    from flask import Flask
    from sqlalchemy.engine import make_url

    from service.api import register_api
    from service.config import ensure_broker_folders, load_config
    from service.store.db import make_engine, make_sessionmaker

    settings = load_config(config)
    app = Flask(__name__)
    app.config.update(settings)
    app.config["MAX_CONTENT_LENGTH"] = int(settings["MAX_BODY_BYTES"])
    app.json.sort_keys = False

    url = make_url(settings["DATABASE_URL"])
    if url.get_backend_name() == "sqlite" and url.database not in (None, "", ":memory:"):
        from pathlib import Path

        Path(url.database).parent.mkdir(parents=True, exist_ok=True)
    ensure_broker_folders(settings)

    engine = make_engine(settings["DATABASE_URL"])
    app.extensions["sizewise"] = {
        "config": settings,
        "engine": engine,
        "sessions": make_sessionmaker(engine),
    }
    register_api(app)
    from service.desk import init_desk

    init_desk(app)
    # The development server logs request lines; report-link secrets must not reach them.
    from service.access_log import redact_werkzeug_log

    redact_werkzeug_log()
    if config is None and not settings.get("TESTING"):
        # The served application (gunicorn's and flask's ``service:create_app()``) logs JSON
        # lines on stderr, each with its HTTP request id (service.jsonlog). A caller passing a
        # config (tests, the demo loader in a launcher) keeps its own logging.
        from service.jsonlog import configure

        configure()
        settle_heap()
    return app


def settle_heap() -> None:
    """Move everything the served application has built so far out of the collector's sight.

    A gunicorn worker holds about 180,000 long-lived objects once Flask, SQLAlchemy, marshmallow,
    numpy and scipy are loaded; each full (generation 2) collection walked them all, about 100 ms
    with every thread of the process stopped, and it came every few thousand requests: the
    largest single pause on the served path. ``gc.freeze`` puts them in the permanent generation
    (never collected, never walked), so a full collection walks only what later requests left
    behind. Garbage made during start-up is collected first so none of it is kept forever.

    The design modules are loaded first: the registry loads them on first use, which made the
    first question a worker answered take about 120 ms (and left them outside the frozen heap).
    """
    import gc

    from service.engine import designs

    designs.all()
    gc.collect()
    gc.freeze()
