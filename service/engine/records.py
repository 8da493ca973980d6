"""Result records: canonical JSON, the record hash, versions and the standing cautions."""

from __future__ import annotations

import functools
import hashlib
import json
import math
from importlib import metadata
from typing import Any

import numpy as np
import scipy

RECORD_VERSION = 2  # 2: the outcome × layout vocabulary (issue 10)

CAUTIONS = (
    "A computed sample size is a planning aid, not a decision: it rests on the assumed effect, "
    "variability and design stated in the question.",
    "The calculation and its assumptions should be reviewed by a qualified statistician before "
    "the protocol is submitted.",
    "Ethics committees, regulators and local rules govern the final sample size and analysis plan.",
)


@functools.cache  # reading package metadata costs more than an analytic answer: once a process
def sizewise_version() -> str:
    """Return the installed sizewise version (or 'unknown' when run from a bare checkout)."""
    try:
        return metadata.version("sizewise")
    except metadata.PackageNotFoundError:  # pragma: no cover - only outside an install
        return "unknown"


def versions() -> dict[str, str]:
    """Return the versions that can change the digits of a result."""
    return {"numpy": np.__version__, "scipy": scipy.__version__, "sizewise": sizewise_version()}


# A total beyond what almost any study enrolls more likely reflects an input slip (an effect in
# the wrong units, a tiny difference) than a plan. Common practice, no source.
IMPLAUSIBLE_TOTAL = 100_000


def size_warnings(record: dict) -> list[str]:
    """A warning when a sample-size answer is beyond what studies enroll (else none)."""
    total = (record.get("sample_size") or {}).get("total")
    if record["question"].get("find") != "sample_size" or total is None:
        return []
    if total <= IMPLAUSIBLE_TOTAL:
        return []
    return [
        f"the answer, {total:,} participants in total, is more than {IMPLAUSIBLE_TOTAL:,}, "
        "beyond what almost any study enrolls: check the effect (and its units), the "
        "variability and the other assumptions before relying on it"
    ]


_LEAVES = frozenset({str, int, bool, type(None)})


def _plain(value: Any) -> Any:
    """Convert numpy scalars/arrays and tuples to JSON types; reject NaN and infinity."""
    kind = type(value)
    # Most of a record is already plain: answer those without the numpy (ABC) checks below.
    if kind in _LEAVES:
        return value
    if kind is float:
        if not math.isfinite(value):
            raise ValueError(f"non-finite number {value!r} in a result record")
        return value
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        if not math.isfinite(value):
            raise ValueError(f"non-finite number {value!r} in a result record")
        return value
    return value


def plain(value: Any) -> Any:
    """Return ``value`` as plain JSON types (dicts, lists, str, int, float, bool, None)."""
    return _plain(value)


def canonical_json(value: Any) -> str:
    """Serialise to the one canonical form that is hashed: sorted keys, no spaces, UTF-8."""
    return _canonical(_plain(value))


def _canonical(plain_value: Any) -> str:
    return json.dumps(
        plain_value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    )


def record_hash(record: dict) -> str:
    """SHA-256 of the canonical JSON of a record without its own ``record_sha256`` field."""
    return _hash(_plain(_without_hash(record)))


def _without_hash(record: dict) -> dict:
    body = {k: v for k, v in record.items() if k != "reproducibility"}
    repro = {k: v for k, v in record.get("reproducibility", {}).items() if k != "record_sha256"}
    body["reproducibility"] = repro
    return body


def _hash(plain_body: dict) -> str:
    return hashlib.sha256(_canonical(plain_body).encode("utf-8")).hexdigest()


def seal(record: dict) -> dict:
    """Return the record as plain JSON types with ``reproducibility.record_sha256`` filled in."""
    record = _plain(record)
    record.setdefault("reproducibility", {})
    # Already plain: hashed as it stands (record_hash would convert it a second time).
    record["reproducibility"]["record_sha256"] = _hash(_without_hash(record))
    return record


def verify(record: dict) -> bool:
    """True when the stored hash matches the record's content."""
    stored = record.get("reproducibility", {}).get("record_sha256")
    return stored is not None and stored == record_hash(record)


def differences(a, b, prefix: str = "") -> list[str]:
    """Return the dotted paths where two JSON values differ (list items as ``path.<index>``)."""
    if isinstance(a, dict) and isinstance(b, dict):
        out: list[str] = []
        for key in sorted(set(a) | set(b)):
            path = f"{prefix}.{key}" if prefix else str(key)
            if key not in a or key not in b:
                out.append(path)
            else:
                out.extend(differences(a[key], b[key], path))
        return out
    if isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        out = []
        for index, (x, y) in enumerate(zip(a, b, strict=True)):
            out.extend(differences(x, y, f"{prefix}.{index}" if prefix else str(index)))
        return out
    return [] if canonical_json(a) == canonical_json(b) else [prefix or "$"]
