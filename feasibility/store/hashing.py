"""Content hashes of documents: the same content gives the same hash, however it was written."""

from __future__ import annotations

import hashlib
import json
from typing import Any

from pydantic import BaseModel

__all__ = ["canonical_json", "document_hash"]


def document_hash(document: BaseModel | dict[str, Any]) -> str:
    """SHA-256 (hex) of the document's canonical JSON.

    A validated model is dumped first, so YAML and JSON spellings, key order,
    sexagesimal or decimal angles and default values all hash alike.
    """
    return hashlib.sha256(canonical_json(document).encode("utf-8")).hexdigest()


def canonical_json(document: BaseModel | dict[str, Any]) -> str:
    """Sorted keys, no spaces, floats to 12 significant digits; models dumped in JSON mode with their aliases.

    The rounding makes '14:30:00' and 217.5 (which parse to floats a last bit
    apart) the same content; 12 digits of a degree are far below any precision
    a proposal means.
    """
    data = document.model_dump(mode="json", by_alias=True) if isinstance(document, BaseModel) else document
    return json.dumps(_rounded(data), sort_keys=True, separators=(",", ":"), ensure_ascii=False)


def _rounded(value: Any) -> Any:
    if isinstance(value, float):
        return float(f"{value:.12g}")
    if isinstance(value, dict):
        return {k: _rounded(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_rounded(v) for v in value]
    return value
