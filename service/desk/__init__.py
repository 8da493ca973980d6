"""The desk: the biostatistics core's pages in a browser (queue, request, review, tokens).

Signed in with a token once (service.desk.session), every page then goes through the same access
table, token lookup and store functions as the JSON API; forms carry Flask-WTF's CSRF token.
The API itself takes no cookie and needs no CSRF token (bearer tokens are not sent by browsers
on their own).
"""

from __future__ import annotations

from flask import Flask
from flask_wtf.csrf import CSRFProtect

from . import session

CSRF_EXTENSION = "desk_csrf"


def init_desk(app: Flask) -> None:
    """Register the desk's blueprint, its session cookie and CSRF protection on ``app``."""
    from . import actions, intake, pages  # noqa: F401  (their routes join the blueprint)
    from .blueprint import bp

    session.configure(app)
    # CSRF is checked by the desk's own hook only (blueprint.check_csrf): the API stays exempt.
    app.config["WTF_CSRF_CHECK_DEFAULT"] = False
    # A form stays valid while its session lives (the secret changes at every sign-in).
    app.config["WTF_CSRF_TIME_LIMIT"] = None
    app.extensions["sizewise"][CSRF_EXTENSION] = CSRFProtect(app)
    app.register_blueprint(bp)
