"""The audit bundle: one self-contained JSON file per computed request.

``export.build_bundle`` writes it from the store (``GET /v1/requests/{id}/bundle``);
``check.verify_bundle`` recomputes and checks it with no server and no database
(``sizewise verify BUNDLE``). The question and the record travel as opaque JSON: the bundle
never reads a question field, so it follows the engine's vocabulary without changes.
"""

FORMAT = "sizewise-audit-bundle"
FORMAT_VERSION = 1
# Where the exact versions the service runs with are pinned (see README, "Audit bundles").
LOCK_FILE = "service/deploy/requirements.lock"
