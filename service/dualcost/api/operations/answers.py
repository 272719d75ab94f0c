"""Parts every answer writes the same way: notices that name their items, the validity block
that says whether the model stands behind its figures (:mod:`dualcost.core.validity`), and the
scale the figures are on."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import Any

from ...core.preferences import Notice
from ...core.validity import MODEL_FIGURES, USABLE_FIGURES, Validity

#: The scale of an answer whose indices are ratios (the comparison, the households): stated in
#: each such answer as ``scale``, the same words everywhere.
SCALE_RATIO: dict[str, str] = {
    "indices": "ratio, 1 = no change",
    "bias": "index points on base 100",
}


def scale_headers(scale: dict[str, str]) -> dict[str, str]:
    """The scale as a CSV answer states it: ``Dualcost-Scale: indices: ...; bias: ...``."""
    return {"Dualcost-Scale": "; ".join(f"{k}: {v}" for k, v in scale.items() if v)}


def item_refs(positions: Iterable[int], ids: Sequence[str],
              labels: Sequence[str | None]) -> list[dict[str, Any]]:
    """The items at ``positions`` (0-based, as the core gives them) by id and label."""
    return [{"id": ids[i], "label": labels[i]} for i in positions]


def _named(refs: list[dict[str, Any]]) -> str:
    shown = [r["id"] if not r["label"] else f"{r['label']} ({r['id']})" for r in refs[:10]]
    more = f" and {len(refs) - 10} more" if len(refs) > 10 else ""
    return ", ".join(shown) + more


def notices_json(notices: Iterable[Notice], ids: Sequence[str] = (),
                 labels: Sequence[str | None] = ()) -> list[dict[str, Any]]:
    """Notices as JSON: code, message and the items they are about, named by id and label (the
    message names them too, so that a reader of the message alone knows which)."""
    out = []
    for n in notices:
        refs = item_refs(n.items, ids, labels or [None] * len(ids)) if ids else []
        message = n.message if not refs else f"{n.message} Items: {_named(refs)}."
        out.append({"code": n.code, "message": message, "items": refs})
    return out


def validity_json(validity: Validity, ids: Sequence[str], labels: Sequence[str | None],
                  figures: dict[str, Any] | None = None) -> dict[str, Any]:
    """The validity block: ``state`` (regular or outside_regular_region), the ``reasons`` with
    the items concerned, what stays usable, and, when the model is not regular, its figures
    for diagnosis under ``figures_not_results`` (never in the answer's headline fields)."""
    regular = validity.regular
    return {
        "state": validity.state,
        "regular": regular,
        "reasons": notices_json(validity.reasons, ids, labels),
        "items": item_refs(validity.items, ids, labels),
        "usable": USABLE_FIGURES,
        "withheld": None if regular else MODEL_FIGURES,
        "figures_not_results": None if regular else figures,
    }
