"""The models of a band (a sensitivity request's ``models``, a comparison's ``band_models``),
each read from the request with a locator of its own, so that an error about model j's
parameters points below its place (``/models/2/sigma``, ``/band_models/0/tree/...``)."""

from __future__ import annotations

from typing import Any

from ...config import Settings
from ...core.preferences import BaseBudget, Preferences, calibrate
from ...core.sensitivity import Calibrator
from ..inputs.items import ItemAxis
from ..inputs.locator import Locator, Place
from ..inputs.model import core_parameters
from ..schemas.model import ModelSpec


def calibrator(root: str, spec: ModelSpec, axis: ItemAxis, loc: Locator, settings: Settings, *,
               query: str | None = None) -> tuple[Calibrator, dict[str, Any]]:
    """The model at ``root``: its calibration callback and its parameters in core form.
    ``query`` is the query parameter that carries its family in a spreadsheet form, if any."""
    own = locator_at(root, loc, axis.ids, query=query)
    parameters = core_parameters(spec, axis, own, max_tree_depth=settings.max_tree_depth,
                                 deadline_seconds=settings.compute_deadline_seconds)

    def calibrated(budget: BaseBudget) -> Preferences:
        with own.translating():
            return calibrate(spec.family, budget, parameters)

    return calibrated, parameters


def locator_at(root: str, loc: Locator, items: list[str], *, query: str | None = None
               ) -> Locator:
    """A copy of ``loc`` that places a model's family and parameters below ``root``."""
    own = Locator(dict(loc.places), loc.form, items=items)
    own.model_root = root
    own.add("model", Place(root, query))
    own.add("family", Place(f"{root}/family", query))
    return own
