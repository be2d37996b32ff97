"""What the review screens take from closecall.analysis, and the one place that knows where.

The screens work without any of it (showing ``—`` where a value is missing): each function
returns None when the analysis module it needs is absent or does not apply (for example a
reference model with imported scores has no band).
"""

from __future__ import annotations

import importlib
from collections.abc import Callable
from types import ModuleType
from typing import TYPE_CHECKING, Any

import numpy as np

from closecall.core.errors import UserError
from closecall.review.queue import MEASURES

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy

#: Queue measure name -> (module, function) that computes it for every case.
MEASURE_SOURCES = {
    "ambiguity": ("closecall.analysis.multiplicity", "ambiguity_measure"),
    "dependence": ("closecall.analysis.dependence", "dependence_share"),
}


def _module(name: str) -> ModuleType | None:
    try:
        return importlib.import_module(name)
    except ModuleNotFoundError as exc:
        if exc.name != name:
            raise
        return None


def _measure_function(name: str) -> Callable[..., np.ndarray] | None:
    if name in MEASURES:
        return MEASURES[name]
    module_name, func_name = MEASURE_SOURCES.get(name, ("", ""))
    module = _module(module_name) if module_name else None
    func = getattr(module, func_name, None) if module is not None else None
    if func is not None:
        MEASURES.setdefault(name, func)  # so build_queue can sort by it
    return func


#: Per-case yes/no filters -> (module, function, extra arguments).
MASK_SOURCES: dict[str, tuple[str, str, tuple[str, ...]]] = {
    "ambiguous": ("closecall.analysis.multiplicity", "ambiguous_cases", ()),
    "rests_on_group": ("closecall.analysis.dependence", "rests_on", ("group",)),
    "rests_on_proxies": ("closecall.analysis.dependence", "rests_on", ("proxies",)),
}


def options(study: OpenedStudy) -> dict[str, Any]:
    """The options ``closecall queue`` passes to the measures (the analysis's own model)."""
    return {"config": study.config}


def measure(study: OpenedStudy, name: str) -> np.ndarray | None:
    """A per-case queue measure for every case, or None when it is not available."""
    func = _measure_function(name)
    if func is None:
        return None
    try:
        return np.asarray(func(study.snapshot, options(study)), dtype=float)
    except (UserError, ValueError):  # e.g. a reference model with imported scores
        return None


def mask(study: OpenedStudy, name: str) -> np.ndarray | None:
    """A per-case filter of the analysis (same function as ``closecall queue``), or None."""
    module_name, func_name, extra = MASK_SOURCES[name]
    module = _module(module_name)
    func = getattr(module, func_name, None) if module is not None else None
    if func is None:
        return None
    try:
        if extra:
            return np.asarray(func(study.snapshot, *extra), dtype=bool)
        return np.asarray(func(study.snapshot, options(study)), dtype=bool)
    except (UserError, ValueError):
        return None


def band_limits(study: OpenedStudy) -> tuple[np.ndarray, np.ndarray] | None:
    """(low, high) reference margin over the equally good models, for every case."""
    module = _module("closecall.analysis.multiplicity")
    if module is None:
        return None
    snap = study.snapshot
    try:
        b = module.bands(snap, snap.reference, float(study.config.multiplicity.epsilon))
    except (UserError, ValueError):
        return None
    margin = np.asarray(b.margin, dtype=float)
    half = np.asarray(b.equally_good, dtype=float)
    return margin - half, margin + half


def half_widths(study: OpenedStudy, model: str) -> np.ndarray | None:
    """Every case's equally-good half-width under ``model`` (None: imported scores, no band)."""
    module = _module("closecall.analysis.multiplicity")
    if module is None:
        return None
    try:
        b = module.bands(study.snapshot, model, float(study.config.multiplicity.epsilon))
    except (UserError, ValueError):
        return None
    return np.asarray(b.equally_good, dtype=float)


def explain(study: OpenedStudy, case_id: str) -> dict[str, Any] | None:
    """One case's analysis through :meth:`closecall.api.study.Study.explain` (what
    ``closecall explain`` and the library give), as the dict the case screen draws from."""
    from closecall.api.study import Study

    return dict(Study(study).explain(case_id).details)
