"""One JSON-friendly conversion for the physics result dataclasses' ``to_dict()``."""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np


def plain(value: Any) -> Any:
    """``value`` with dataclasses as dicts, numpy scalars and arrays as Python numbers and lists,
    tuples as lists — what ``json.dumps`` accepts."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {k: plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    return value


class ResultDict:
    """Mixin of the physics result dataclasses: ``to_dict()`` is their JSON-friendly dict."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly dict of all fields (see :func:`plain`)."""
        return plain(self)
