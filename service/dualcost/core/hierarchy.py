"""A classification hierarchy for a price index: a tree of groups, elementary aggregates at its
leaves, and the weights of each level, checked the way a statistical office's classification is.

A node is a group (it has children) or an elementary aggregate (a leaf: the quotes of its
items are averaged without weights). Any classification the caller brings will do: a node is
named by its label, and names are unique. The weights of one period of weights give each node's
share of the whole basket in any unit (per mille is usual): an elementary aggregate must have
one; a group may have one, and then its children's weights must add up to it within a relative
tolerance, or, if the caller asks, they are scaled to it and a notice says so. A group without a
weight weighs what its children weigh together (CPI Manual 2004, ch. 4 and 9.9-9.16: weights of
the expenditure aggregates at each level of the classification; from memory).

Every error is ``InvalidInput(parameter, rule, index=node)`` with ``node`` the node's position
in the list given to :func:`build_hierarchy` (for weights ``(node,)``), and the rule names the
node by its path of names (``'all items > food > bread'``), so the caller can point at it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from .errors import InvalidInput
from .preferences.base import Notice

Vector = NDArray[np.float64]

#: The unweighted formulas an elementary aggregate may use (see :mod:`dualcost.core.aggregation`).
ELEMENTARY_FORMULAS = ("jevons", "carli", "dutot")
#: The weighted formulas of the levels above the elementary aggregates.
UPPER_FORMULAS = ("lowe", "young")


@dataclass(frozen=True)
class Hierarchy:
    """A checked tree. ``parents[k]`` is ``-1`` for the root; ``order`` lists every node after
    all its children (bottom-up); ``formulas[k]`` is the elementary formula of an elementary
    aggregate (``None`` for a group) and ``sigmas[k]`` the node's elasticity of substitution
    where given."""

    names: tuple[str, ...]
    parents: tuple[int, ...]
    children: tuple[tuple[int, ...], ...]
    depths: tuple[int, ...]
    order: tuple[int, ...]
    formulas: tuple[str | None, ...]
    sigmas: tuple[float | None, ...]

    @property
    def root(self) -> int:
        return self.parents.index(-1)

    @property
    def size(self) -> int:
        return len(self.names)

    @property
    def elementary(self) -> tuple[int, ...]:
        """The elementary aggregates (leaves) in the order nodes were given."""
        return tuple(k for k, kids in enumerate(self.children) if not kids)

    @property
    def groups(self) -> tuple[int, ...]:
        return tuple(k for k, kids in enumerate(self.children) if kids)

    def path(self, k: int) -> str:
        """``'all items > food > bread'``: the node's name after its ancestors'."""
        return path_of(self.names, self.parents, k)


def path_of(names: Sequence[str], parents: Sequence[int], k: int) -> str:
    parts, seen = [], set()
    while k >= 0 and k not in seen:  # a cycle is reported by its caller, not walked forever
        seen.add(k)
        parts.append(names[k])
        k = parents[k]
    return " > ".join(reversed(parts))


def build_hierarchy(names: Sequence[str], parents: Sequence[str | None], *,
                    formulas: Sequence[str | None], sigmas: Sequence[float | None],
                    default_formula: str = "jevons", max_depth: int | None = None) -> Hierarchy:
    """Check a classification given as nodes with their parent's name and build the tree.

    Rules: names unique and non-empty; exactly one root (no parent); every parent a node of the
    tree; no node its own ancestor (a cycle); the root a group; an elementary formula only on
    an elementary aggregate; sigma zero or more; at most ``max_depth`` levels below the root.
    """
    position = _positions(names)
    parent_ids = [_parent_of(names, position, p, k) for k, p in enumerate(parents)]
    roots = [k for k, p in enumerate(parent_ids) if p < 0]
    if not roots:
        raise InvalidInput("parent", "no node is the root: exactly one node must have no parent "
                           "(the whole basket)", index=0)
    if len(roots) > 1:
        raise InvalidInput("parent", f"node {names[roots[1]]!r} has no parent, and neither has "
                           f"{names[roots[0]]!r}; a tree has exactly one root", index=roots[1])
    depths = _depths(names, parent_ids, max_depth)
    children: list[list[int]] = [[] for _ in names]
    for k, p in enumerate(parent_ids):
        if p >= 0:
            children[p].append(k)
    if not children[roots[0]]:
        raise InvalidInput("children", f"the root {names[roots[0]]!r} has no children; give it "
                           "groups or elementary aggregates", index=roots[0])
    resolved = _formulas(names, parent_ids, children, formulas, default_formula)
    for k, sigma in enumerate(sigmas):
        if sigma is not None and not (np.isfinite(sigma) and sigma >= 0.0):
            raise InvalidInput("sigma", f"node {path_of(names, parent_ids, k)!r} has sigma "
                               f"{sigma:g}; an elasticity of substitution is 0 or more", index=k)
    order = sorted(range(len(names)), key=lambda k: -depths[k])
    return Hierarchy(tuple(names), tuple(parent_ids), tuple(tuple(c) for c in children),
                     tuple(depths), tuple(order), tuple(resolved), tuple(sigmas))


def _positions(names: Sequence[str]) -> dict[str, int]:
    position: dict[str, int] = {}
    for k, name in enumerate(names):
        if not name:
            raise InvalidInput("name", "a node's name must be non-empty text", index=k)
        if name in position:
            raise InvalidInput("name", f"node {name!r} appears twice (nodes {position[name] + 1} "
                               f"and {k + 1} in the order given); every node appears once",
                               index=k)
        position[name] = k
    return position


def _parent_of(names: Sequence[str], position: dict[str, int], parent: str | None,
               k: int) -> int:
    if parent is None:
        return -1
    if parent not in position:
        raise InvalidInput("parent", f"node {names[k]!r} names the parent {parent!r}, which is "
                           "not a node of the tree", index=k)
    return position[parent]


def _depths(names: Sequence[str], parents: Sequence[int], max_depth: int | None) -> list[int]:
    """Each node's depth (the root 0), walking up without recursion; a walk that comes back to
    a node it has passed is a cycle."""
    depth = [-1] * len(names)
    for start in range(len(names)):
        walk: list[int] = []
        on_walk: set[int] = set()
        k = start
        while k >= 0 and depth[k] < 0:
            if k in on_walk:
                cycle = walk[walk.index(k):] + [k]
                shown = " > ".join(names[c] for c in reversed(cycle))
                raise InvalidInput("parent", f"node {names[k]!r} is its own ancestor "
                                   f"({shown}); a classification has no cycles", index=k)
            walk.append(k)
            on_walk.add(k)
            k = parents[k]
        above = -1 if k < 0 else depth[k]
        for node in reversed(walk):
            above += 1
            depth[node] = above
            if max_depth is not None and above > max_depth:
                raise InvalidInput("parent", f"node {path_of(names, parents, node)!r} is "
                                   f"{above} levels below the root; the limit is {max_depth}",
                                   index=node)
    return depth


def _formulas(names: Sequence[str], parents: Sequence[int], children: Sequence[Sequence[int]],
              formulas: Sequence[str | None], default: str) -> list[str | None]:
    out: list[str | None] = []
    for k, formula in enumerate(formulas):
        if formula is not None and children[k]:
            raise InvalidInput("formula", f"group {path_of(names, parents, k)!r} has children; "
                               "an elementary formula belongs to an elementary aggregate (a "
                               "node without children)", index=k)
        if formula is not None and formula not in ELEMENTARY_FORMULAS:
            raise InvalidInput("formula", f"node {names[k]!r} has formula {formula!r}; an "
                               f"elementary formula is one of {', '.join(ELEMENTARY_FORMULAS)}",
                               index=k)
        out.append(None if children[k] else (formula or default))
    return out


# -- weights ------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Weights:
    """One period of weights, checked: every node's share of the whole basket (``shares``,
    summing to 1 over the elementary aggregates) and what was done to them (``notices``)."""

    shares: Vector
    notices: tuple[Notice, ...]


def check_weights(h: Hierarchy, given: npt.ArrayLike, *, tolerance: float = 1e-6,
                  normalise: bool = False, label: str = "") -> Weights:
    """Check one period of weights (``NaN``: not given) at every node and turn them into shares.

    A group's given weight ``W_g`` and its children's weights ``w_c`` (given, or their own
    children's sum) must satisfy ``|sum_c w_c - W_g| <= tolerance W_g``; with ``normalise`` the
    children are scaled by ``W_g / sum_c w_c`` instead and a notice names the group, the sum
    and the factor. ``label`` names the period of weights in messages. Errors:
    ``InvalidInput("weights", rule, index=(node,))``.
    """
    w = np.array(given, dtype=np.float64, copy=True)
    raw = _raw_weights(h, w, label)
    notices: list[Notice] = []
    if not normalise:  # the deepest group that does not add up is the one to correct
        for g in h.order:
            total = float(np.sum(raw[list(h.children[g])]))
            if h.children[g] and not np.isnan(w[g]) and abs(total - w[g]) > tolerance * w[g]:
                raise InvalidInput("weights", f"the weights of the children of "
                                   f"{h.path(g)!r} add up to {total:.10g}, not to its weight "
                                   f"{w[g]:.10g}{label} (difference {total - w[g]:.3g}, "
                                   f"tolerance {tolerance:g} of the weight); correct them, or "
                                   "ask for normalise_weights", index=(g,))
    scale = np.ones(h.size)
    for g in sorted(h.groups, key=lambda k: h.depths[k]):  # top-down: a factor passes down
        kids = list(h.children[g])
        total = float(np.sum(raw[kids]))
        if np.isnan(w[g]) or abs(total - w[g]) <= tolerance * w[g]:
            scale[kids] = scale[g]  # within the tolerance nothing is rescaled
            continue
        notices.append(Notice("weights_normalised", f"The weights of the children of "
                              f"{h.path(g)!r}{label} added up to {total:.10g}, not to its "
                              f"weight {w[g]:.10g}; they were scaled by {w[g] / total:.10g} "
                              "to add up to it."))
        scale[kids] = scale[g] * w[g] / total
    scaled = raw * scale
    grand = float(np.sum(scaled[list(h.elementary)]))
    return Weights(scaled / grand, tuple(notices))


def _raw_weights(h: Hierarchy, w: Vector, label: str) -> Vector:
    """Given weights where given, else the children's sum (bottom-up)."""
    raw = np.zeros(h.size)
    for k in h.order:
        if not h.children[k]:
            if np.isnan(w[k]):
                raise InvalidInput("weights", f"elementary aggregate {h.path(k)!r} has no "
                                   f"weight{label}; every elementary aggregate needs one",
                                   index=(k,))
            raw[k] = w[k]
        else:
            raw[k] = w[k] if not np.isnan(w[k]) else float(np.sum(raw[list(h.children[k])]))
        if not np.isnan(w[k]) and not (np.isfinite(w[k]) and w[k] > 0.0):
            raise InvalidInput("weights", f"node {h.path(k)!r} has weight {w[k]:g}{label}; a "
                               "weight must be a positive number", index=(k,))
    return raw
