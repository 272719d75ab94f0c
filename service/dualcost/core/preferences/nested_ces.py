"""Nested CES preferences: a tree of item groups, each with its own elasticity of substitution
(Sato 1967; Keller 1976).

The items sit at the leaves of a tree of groups, the way consumer price index hierarchies are
built. Group ``g`` has an elasticity of substitution ``sigma_g >= 0`` between its children and a
base share ``S_g`` (the sum of its items' base shares; ``S_root = 1``). In the calibrated share
form each node has a cost relative ``P``: an item's is ``p_i / p0_i``, and a group's is the power
mean of order ``1 - sigma_g`` of its children's, weighted by their within-group base shares
``omega_c = S_c / S_g``,

    P_g(p) = ( sum_c omega_c P_c(p)^(1 - sigma_g) )^(1 / (1 - sigma_g)),

with the geometric mean at ``sigma_g = 1`` (Hardy, Littlewood and Polya 1934, ch. II). The unit
cost is the root's relative, ``c(p) = P_root(p)``, ``c(p0) = 1``, and ``e(p, u) = u c(p)`` with
utility measured as money at base prices (Sato 1967, in share form).

Demands follow from Shephard's lemma: the share of item ``i`` is the product, along the path from
the root to ``i``, of each child's current share in its group,
``omega_c P_c^(1 - sigma_g) / sum_k omega_k P_k^(1 - sigma_g)``; then ``x = m w / p`` and
``h = e(p, u) w / p`` (Keller 1976).

The dual direct utility has the same tree with power means of order
``rho_g = (sigma_g - 1) / sigma_g`` of the children's quantity indices ``Z``,

    Z_i = p0_i x_i / s_i,    Z_g = ( sum_c omega_c Z_c^(rho_g) )^(1 / rho_g),    u(x) = Z_root,

the minimum at ``sigma_g = 0`` and the geometric mean at ``sigma_g = 1``. Each group is a flat
calibrated CES aggregate of its children, valued at base prices, so ``u(q0) = m0`` and ``u`` is
dual to ``c`` group by group (Sato 1967).

Zero base shares. An item with zero base share carries zero weight in its group: it never enters
the cost, gets zero demand and is left out of ``u``. A group whose items all have zero base share
is handled the same way: it carries zero weight in its parent. To keep its own (unused) cost
relative defined, its children are given equal weights.

Evaluation never recurses: calibration compiles the tree into arrays grouped by depth (the
deepest first, so every group comes after its children), and each depth is one vectorised
segment reduction, so a 1,000-deep chain is as safe as a three-level tree. Each power mean is
shifted by its weighted mean of ``(1 - sigma) ln P`` and evaluated with ``expm1``/``log1p``,
which keeps full accuracy as ``sigma`` approaches 1, and falls back to a max shift where a term
could overflow (large sigma).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property
from itertools import accumulate, chain
from numbers import Integral, Real
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from .. import _checks
from .._means import log_quantity_mean
from ..errors import InvalidInput
from .base import BaseBudget, HomotheticPreferences, ParameterSpec, Vector

IndexArray = NDArray[np.intp]

#: The root group's name when the tree does not give one.
ROOT_NAME = "all items"
# Beyond this shifted exponent an exp could overflow; the shift moves to the largest term.
_SHIFT_LIMIT = 30.0
_TINY = float(np.finfo(np.float64).tiny)

#: A place in the tree as the request writes it: the keys and list positions that lead there from
#: the tree object, ``("children", 1, "children", 0)`` for the first child of the second child,
#: ``("children", 2, "sigma")`` for that group's sigma; ``()`` is the tree itself.
TreePath = tuple[int | str, ...]


# -- the tree as given: parsing and validation ------------------------------------------------


@dataclass(frozen=True)
class _Tree:
    """A checked tree. Group 0 is the root; a group's id is larger than its parent's.

    ``children[g]`` holds node ids: ``0..n-1`` are items, ``n + k`` is group ``k``.
    """

    n_items: int
    labels: tuple[str, ...]
    parents: tuple[int, ...]
    sigmas: tuple[float, ...]
    children: tuple[tuple[int, ...], ...]


@dataclass(frozen=True)
class TreeForm:
    """What a group of the tree holds in one use of it, and how the tree's rules are worded there.

    A model gives every group its elasticity of substitution; a fit leaves the sigmas out (they
    are what it estimates) and needs two children per group, or there is no substitution to
    estimate. ``default_label(g, position)`` names an unnamed group from its number and its
    1-based position among its parent's children; ``unique_defaults`` says whether those
    stand-in names count in the check that names are unique. ``wording`` holds one
    :meth:`str.format` template per rule. ``numbering`` says how groups are numbered: ``listed``,
    depth first in the order they are listed (a fit's parameters follow it), or ``reached``: the
    root, then a group's subgroups together when the group is read, the groups being read from
    the last listed (the order of a model's answers since the service's first version).
    """

    keys: frozenset[str]
    with_sigma: bool
    min_children: int
    default_label: Callable[[int, int], str]
    unique_defaults: bool
    wording: Mapping[str, str]
    numbering: Literal["listed", "reached"] = "listed"


_MODEL_WORDING: dict[str, str] = {
    "required": "is required: give the grouping of items as a group with sigma and children",
    "not_a_group": "must be a group: an object with 'sigma' and 'children' (and an optional "
                   "'name')",
    "bad_name": "{where} has name {name!r}; a group name must be non-empty text",
    "group_twice": "group '{path}' appears more than once in the tree (or inside itself); every "
                   "group must appear once",
    "unknown_keys": "group '{path}' has unknown key(s) {keys}; a group takes 'name', 'sigma' and "
                    "'children'",
    "same_name": "two groups are named '{label}' ('{other}' and '{path}'); group names must be "
                 "unique",
    "no_sigma": "group '{path}' has no sigma; give its elasticity of substitution (0 or more)",
    "sigma_not_number": "group '{path}' has sigma {raw!r}, which is not a number",
    "sigma_as_text": "group '{path}' has sigma {raw!r}, which is not a number but text; write "
                     "it as a number ({raw}, not {raw!r})",
    "sigma_not_finite": "group '{path}' has sigma {sigma}; it must be a finite number",
    "sigma_negative": "group '{path}' has sigma {sigma:g}; an elasticity of substitution must be "
                      "zero or more",
    "few_children": "group '{path}' has no children; every group needs at least one item "
                    "position or subgroup in 'children'",
    "unknown_id": "group '{path}' lists {child!r}, which is not an item id listed in items",
    "out_of_range": "group '{path}' lists item {i}, but item positions run from 0 to {last} "
                    "(there are {n} items)",
    "too_deep": "child {k} of group '{path}' makes the tree deeper than the limit of {max_depth} "
                "levels",
    "bad_child": "child {k} of group '{path}' is {child!r}, which is neither {item} nor a group "
                 "(an object with sigma and children)",
    "item_twice": "item {i} appears twice, in '{first}' {second}; every item must appear exactly "
                  "once",
    "missing": "{noun} {shown} {verb} not in the tree; every item position from 0 to {last} must "
               "appear exactly once",
}

#: The tree of a nested CES model: ``{"name", "sigma", "children"}`` per group.
MODEL_TREE = TreeForm(
    keys=frozenset(("name", "sigma", "children")), with_sigma=True, min_children=1,
    default_label=lambda g, position: f"group #{position}", unique_defaults=False,
    wording=_MODEL_WORDING, numbering="reached",
)

#: The grouping of a nested CES fit: ``{"name", "children"}`` per group, two children or more.
#: Its rules keep the words the fit's answers have always used.
FIT_TREE = TreeForm(
    keys=frozenset(("name", "children")), with_sigma=False, min_children=2,
    default_label=lambda g, position: f"group {g}", unique_defaults=True,
    wording=_MODEL_WORDING | {
        "required": "is required: give the grouping of the items (groups with 'name' and "
                    "'children')",
        "not_a_group": "must be a group: an object with 'children' (and an optional 'name')",
        "bad_name": "a group name must be non-empty text, got {name!r}",
        "unknown_keys": "group {parent} has unknown key(s) {keys}; a group takes 'name' and "
                        "'children'{extra}",
        "same_name": "two groups are named {label!r}; group names must be unique",
        "few_children": "group {label!r} needs at least two children (items or groups): with "
                        "fewer there is no substitution to estimate",
        "out_of_range": "group {label!r} lists item {i}, but item positions run from 0 to {last}",
        "bad_child": "group {label!r} has a child {child!r} that is neither an item nor a group",
        "item_twice": "item {i} is listed twice (in {owner!r} and {label!r}); every item belongs "
                      "to one group",
        "missing": "item {first_missing} is in no group; every item must appear once in the tree",
    },
)


@dataclass(frozen=True)
class ItemIdTree:
    """A tree whose children name items by id, as a request gives them: ``positions`` maps each
    id to its item position, and ``max_depth`` (if given) limits the levels of groups."""

    spec: Any
    positions: Mapping[str, int]
    max_depth: int | None = None


def parse_tree(tree: Any, n_items: int, *, form: TreeForm = MODEL_TREE) -> _Tree:
    """Check a nested tree of item groups and flatten it; the one reader of trees in the core.

    ``tree`` is a group ``{"name", "sigma", "children"}`` (the keys ``form`` takes) whose
    children are item positions ``0..n-1`` and further groups, or an :class:`ItemIdTree` whose
    children name items by id and which may limit the depth. Groups are numbered in the order
    they are listed (depth first), the root 0. Every error is ``InvalidInput("tree", rule,
    index=path)`` with ``path`` the :data:`TreePath` of the offending place, and its message
    names the group by its path of names (``'all items > food'``).
    """
    if isinstance(tree, ItemIdTree):
        return _Walk(form, n_items, tree.positions, tree.max_depth).read(tree.spec)
    return _Walk(form, n_items, None, None).read(tree)


def _path(labels: Sequence[str | None], parents: Sequence[int], group: int) -> str:
    """``'all items > food > fresh'``: the group's name preceded by its ancestors'."""
    parts = []
    while group >= 0:
        parts.append(str(labels[group]))
        group = parents[group]
    return " > ".join(reversed(parts))


def _is_list(kids: Any) -> bool:
    """Whether ``children`` is a list of children (type() first: the abstract checks are slow)."""
    return type(kids) is list or (
        not isinstance(kids, (str, bytes)) and isinstance(kids, Sequence))


def _is_position(child: Any) -> bool:
    """A whole number that is not a bool (numpy's integers too)."""
    return type(child) is int or (isinstance(child, Integral) and not isinstance(child, bool))


class _Walk:
    """One pass over a tree in listed order, with an explicit stack so depth costs no recursion.

    A group's path of names (``'all items > food'``) is spelled out only for an error message:
    building it for every group would cost more than the rest of the walk.
    """

    def __init__(self, form: TreeForm, n_items: int, item_ids: Mapping[str, int] | None,
                 max_depth: int | None) -> None:
        self.form, self.n_items, self.item_ids, self.max_depth = form, n_items, item_ids, max_depth
        self.labels: list[str] = []
        self.parents: list[int] = []
        self.depths: list[int] = []
        self.places: list[TreePath] = []
        self.sigmas: list[float] = []
        self.children: list[list[int]] = []
        self.owner = [-1] * n_items
        self.named: dict[str, int] = {}
        self.seen: set[int] = set()

    def fail(self, rule: str, place: TreePath, g: int | None = None, **facts: Any) -> InvalidInput:
        """The error of ``rule`` at ``place``, worded by the form; ``g`` is the group being read."""
        if g is not None:
            parent = self.parents[g]
            facts.setdefault("path", _path(self.labels, self.parents, g))
            facts.setdefault("label", self.labels[g])
            facts.setdefault("parent", "at the root" if parent < 0 else repr(self.labels[parent]))
        return InvalidInput("tree", self.form.wording[rule].format(**facts), place)

    def read(self, spec: Any) -> _Tree:
        """The checked tree: every group read, then every item accounted for."""
        if spec is None:
            raise self.fail("required", ())
        if not isinstance(spec, Mapping):
            raise self.fail("not_a_group", ())
        reached = self.form.numbering == "reached"
        # (spec of the group, its number or its parent's, its position among the parent's
        # children, its place)
        stack: list[tuple[Mapping[str, Any], int, int, TreePath]] = [
            (spec, self._allocate(-1, ()) if reached else -1, 0, ())]
        while stack:
            node, number, k, place = stack.pop()
            g = number if reached else self._allocate(number, place, k)
            self._open(node, g, k, place)
            subgroups = self._read_children(node, g)
            # Listed numbering pushes them in reverse, so that they are read, and numbered, in
            # the order listed; numbered when reached, they are read from the last listed.
            stack.extend(subgroups if reached else reversed(subgroups))
        self._check_every_item_placed()
        return _Tree(
            n_items=self.n_items,
            labels=tuple(self.labels),
            parents=tuple(self.parents),
            sigmas=tuple(self.sigmas),
            children=tuple(tuple(c) for c in self.children),
        )

    def _allocate(self, parent: int, place: TreePath, k: int = -1) -> int:
        """Number a group and link it to its parent (``k``: its place among the parent's
        children, when a placeholder holds it there)."""
        g = len(self.labels)
        if parent >= 0 and k >= 0:
            self.children[parent][k] = self.n_items + g
        self.parents.append(parent)
        self.depths.append(1 if parent < 0 else self.depths[parent] + 1)
        self.places.append(place)
        self.children.append([])
        self.labels.append("")
        self.sigmas.append(math.nan)
        return g

    def _open(self, node: Mapping[str, Any], g: int, k: int, place: TreePath) -> None:
        """Check the group's own keys, name and sigma (not its children)."""
        self.labels[g] = self._label(node, g, k + 1)
        if id(node) in self.seen:
            raise self.fail("group_twice", place, g)
        self.seen.add(id(node))
        if not node.keys() <= self.form.keys:
            unknown = sorted((key for key in node if key not in self.form.keys), key=str)
            first = unknown[0] if isinstance(unknown[0], (int, str)) else str(unknown[0])
            extra = (" (sigma is what the fit estimates; leave it out)"
                     if "sigma" in unknown and not self.form.with_sigma else "")
            raise self.fail("unknown_keys", place + (first,), g,
                            keys=", ".join(repr(str(key)) for key in unknown), extra=extra)
        self._check_unique(node, g)
        if self.form.with_sigma:
            self.sigmas[g] = self._sigma(node, g)

    def _label(self, node: Mapping[str, Any], g: int, position: int) -> str:
        """The group's own name, or a stand-in saying where it sits when it has none."""
        name = node.get("name")
        parent = self.parents[g]
        if name is None:
            return ROOT_NAME if parent < 0 else self.form.default_label(g, position)
        if not isinstance(name, str) or not name.strip():
            where = "the root group" if parent < 0 else (
                f"child {position} of '{_path(self.labels, self.parents, parent)}'")
            raise self.fail("bad_name", self.places[g] + ("name",), where=where, name=name)
        return name.strip()

    def _check_unique(self, node: Mapping[str, Any], g: int) -> None:
        """Group names are unique; so is the root's stand-in (and a fit's stand-ins)."""
        label = self.labels[g]
        given = node.get("name") is not None
        if not (given or g == 0 or self.form.unique_defaults):
            return
        if label in self.named:
            place = self.places[g] + ("name",) if given else self.places[g]
            raise self.fail("same_name", place, g,
                            other=_path(self.labels, self.parents, self.named[label]))
        self.named[label] = g

    def _sigma(self, node: Mapping[str, Any], g: int) -> float:
        """The group's elasticity of substitution: a finite number, zero or more."""
        raw = node.get("sigma")
        if type(raw) is float and 0.0 <= raw < math.inf:
            return raw
        place = self.places[g] + ("sigma",)
        if raw is None:
            raise self.fail("no_sigma", place, g)
        if isinstance(raw, str):
            raise self.fail("sigma_as_text", place, g, raw=raw)
        if isinstance(raw, bool) or not isinstance(raw, Real):
            raise self.fail("sigma_not_number", place, g, raw=raw)
        sigma = float(raw)
        if not math.isfinite(sigma):
            raise self.fail("sigma_not_finite", place, g, sigma=sigma)
        if sigma < 0.0:
            raise self.fail("sigma_negative", place, g, sigma=sigma)
        return sigma

    def _read_children(self, node: Mapping[str, Any], g: int
                       ) -> list[tuple[Mapping[str, Any], int, int, TreePath]]:
        """Place the group's items; its subgroups, to be read next, in the order listed."""
        kids: Any = node.get("children")
        place = self.places[g]
        if not _is_list(kids) or len(kids) < self.form.min_children:
            raise self.fail("few_children", place + ("children",), g)
        ids, n, owner = self.item_ids, self.n_items, self.owner
        reached = self.form.numbering == "reached"
        mine = self.children[g]
        subgroups: list[tuple[Mapping[str, Any], int, int, TreePath]] = []
        for k, child in enumerate(kids):
            if type(child) is str and ids is not None:
                i = ids.get(child, -1)
                if i < 0:
                    raise self.fail("unknown_id", place + ("children", k), g, child=child)
            elif ids is None and (type(child) is int or _is_position(child)):
                i = int(child)
                if not 0 <= i < n:
                    raise self.fail("out_of_range", place + ("children", k), g, i=i, last=n - 1,
                                    n=n)
            elif type(child) is dict or isinstance(child, Mapping):
                if self.max_depth is not None and self.depths[g] + 1 > self.max_depth:
                    raise self.fail("too_deep", place + ("children", k), g, k=k + 1,
                                    max_depth=self.max_depth)
                where = place + ("children", k)
                if reached:  # numbered now, together with its siblings
                    sub = self._allocate(g, where)
                    mine.append(n + sub)
                    subgroups.append((child, sub, k, where))
                else:  # numbered when read; a placeholder holds its place meanwhile
                    mine.append(-1)
                    subgroups.append((child, g, k, where))
                continue
            else:
                item = "an item id" if ids is not None else "an item position (a whole number)"
                raise self.fail("bad_child", place + ("children", k), g, k=k + 1, child=child,
                                item=item)
            if owner[i] >= 0:
                raise self._item_twice(i, g, place + ("children", k))
            owner[i] = g
            mine.append(i)
        return subgroups

    def _item_twice(self, i: int, g: int, place: TreePath) -> InvalidInput:
        first = self.owner[i]
        second = "again" if first == g else f"and in '{_path(self.labels, self.parents, g)}'"
        return self.fail("item_twice", place, g, i=i, first=_path(self.labels, self.parents, first),
                        second=second, owner=self.labels[first])

    def _check_every_item_placed(self) -> None:
        n = self.n_items
        if -1 not in self.owner:
            return
        missing = [i for i in range(n) if self.owner[i] < 0]
        shown = ", ".join(str(i) for i in missing[:10]) + (", ..." if len(missing) > 10 else "")
        one = len(missing) == 1
        raise self.fail("missing", (), noun="item" if one else "items", shown=shown,
                        verb="is" if one else "are", last=n - 1, first_missing=missing[0])


# -- the tree compiled for evaluation ------------------------------------------------------------


@dataclass(frozen=True)
class _Level:
    """All groups at one depth, with their child edges stored contiguously per group."""

    nodes: IndexArray  # node id of each group at this depth
    starts: IndexArray  # first edge of each group
    child: IndexArray  # node id of each edge's child
    seg: IndexArray  # position (within this level) of each edge's group
    parent: IndexArray  # node id of each edge's group
    weight: Vector  # omega_c, the child's within-group base share
    log_weight: Vector  # ln omega_c, -inf where omega_c = 0
    positive: NDArray[np.bool_]
    t_edge: Vector  # 1 - sigma of the edge's group
    t_safe: Vector  # 1 - sigma per group, with 1 where it is 0 (the geometric limit)
    geometric: bool  # every group here has sigma = 1


def _compile(tree: _Tree, shares: Vector) -> tuple[Vector, list[_Level]]:
    """Node base shares and the levels, deepest groups first, each with its groups' edges.

    A group's children are one level deeper than it, so evaluating the levels from the
    deepest up finds every child's relative ready. The groups are put in that order once, the
    edge arrays are built for all of them at once, and each level is a slice: a tree has few
    levels but the fixed cost of an array operation, paid per level, would exceed the work.
    """
    n, n_groups = tree.n_items, len(tree.labels)
    depth = [0] * n_groups
    for g in range(1, n_groups):
        depth[g] = depth[tree.parents[g]] + 1
    order = sorted(range(n_groups), key=depth.__getitem__, reverse=True)  # stable: ids ascend
    kids_of = [tree.children[g] for g in order]
    counts = list(map(len, kids_of))
    share_of = shares.tolist() + [0.0] * n_groups
    for g, kids in zip(order, kids_of, strict=True):
        # Exact sums (Shewchuk's algorithm, as math.fsum) of the children's shares; the
        # children are deeper, so theirs are known.
        share_of[n + g] = math.fsum(map(share_of.__getitem__, kids))
    node_share = np.array(share_of)
    child = np.array(list(chain.from_iterable(kids_of)), dtype=np.intp)
    counts_a = np.array(counts, dtype=np.intp)
    nodes = np.array(order, dtype=np.intp) + n
    group_of_edge = np.repeat(np.arange(n_groups, dtype=np.intp), counts_a)  # position in order
    edge_total = node_share[nodes][group_of_edge]
    # An all-zero group: equal weights keep its unused relative defined.
    weight = np.divide(node_share[child], edge_total,
                       out=1.0 / counts_a[group_of_edge].astype(np.float64), where=edge_total > 0.0)
    positive = weight > 0.0
    log_weight = np.full(weight.shape, -np.inf)
    np.log(weight, out=log_weight, where=positive)
    t_list = [1.0 - tree.sigmas[g] for g in order]
    t_group = np.array(t_list)
    t_edge = t_group[group_of_edge]
    t_safe = np.where(t_group == 0.0, 1.0, t_group)
    parent = nodes[group_of_edge]
    first_edge = list(accumulate(counts, initial=0))
    levels = []
    a = 0
    while a < n_groups:  # groups a..b-1 share a depth; their edges are ea..eb-1
        b = a + 1
        while b < n_groups and depth[order[b]] == depth[order[a]]:
            b += 1
        ea, eb = first_edge[a], first_edge[b]
        levels.append(
            _Level(
                nodes=nodes[a:b],
                starts=np.array(first_edge[a:b], dtype=np.intp) - ea,
                child=child[ea:eb],
                seg=group_of_edge[ea:eb] - a,
                parent=parent[ea:eb],
                weight=weight[ea:eb],
                log_weight=log_weight[ea:eb],
                positive=positive[ea:eb],
                t_edge=t_edge[ea:eb],
                t_safe=t_safe[a:b],
                geometric=all(t == 0.0 for t in t_list[a:b]),
            )
        )
        a = b
    return node_share, levels


def _level_up(level: _Level, log_rel: Vector) -> tuple[Vector, Vector]:
    """Log cost relatives of the level's groups and the current within-group shares of its edges.

    With ``d_e = t (ln P_e - a)``, ``a`` the weighted mean of the children's ``ln P``,
    ``ln P_g = a + ln(sum_e omega_e exp(d_e)) / t``; by Jensen's inequality the sum is at least
    1, so ``log1p(sum omega expm1(d))`` is accurate as ``t -> 0`` and cannot fail.
    """
    lc = log_rel[level.child]
    mean = np.add.reduceat(level.weight * lc, level.starts)
    if level.geometric:
        return mean, level.weight
    d = np.where(level.positive, level.t_edge * (lc - mean[level.seg]), 0.0)
    # Zero-weight edges sit at 0, below the largest weighted term (which is at least 0).
    if d.max() > _SHIFT_LIMIT:
        excess = np.maximum(np.maximum.reduceat(d, level.starts) - _SHIFT_LIMIT, 0.0)
        big = excess > 0.0
        shifted = d - excess[level.seg]
        plain = np.add.reduceat(level.weight * np.expm1(np.minimum(d, _SHIFT_LIMIT)), level.starts)
        direct = np.add.reduceat(level.weight * np.exp(shifted), level.starts)
        log_sum = np.where(
            big,
            excess + np.log(np.maximum(direct, _TINY)),
            np.log1p(np.where(big, 0.0, plain)),
        )
    else:
        log_sum = np.log1p(np.add.reduceat(level.weight * np.expm1(d), level.starts))
    within = np.exp(d + level.log_weight - log_sum[level.seg])
    return mean + log_sum / level.t_safe, within


# -- the family ------------------------------------------------------------------------------------


class NestedCES(HomotheticPreferences):
    """Nested CES preferences in calibrated share form, over a tree of item groups."""

    family = "nested_ces"
    title = "Nested CES: a tree of item groups, each with its own elasticity of substitution"
    source = (
        "Sato (1967), Review of Economic Studies 34(2); Keller (1976), European Economic "
        "Review 7; calibrated share form as for CES (Lloyd 1975; Moulton 1996)"
    )
    parameter_specs = (
        ParameterSpec(
            "tree",
            "The grouping of items: a group is {\"name\": optional text, \"sigma\": elasticity "
            "of substitution between its children (0 or more), \"children\": item positions "
            "0..n-1 and subgroups}; every item appears exactly once.",
            required=True,
            shape="tree",
        ),
    )

    one_pass = True

    def __init__(self, shares: Vector, reference_prices: Vector, tree: _Tree) -> None:
        self.shares = np.asarray(shares, dtype=np.float64)
        self.reference_prices = np.asarray(reference_prices, dtype=np.float64)
        self.n_items = int(self.shares.size)
        if tree.n_items != self.n_items:
            raise InvalidInput("tree", f"is built for {tree.n_items} items, not {self.n_items}")
        self._tree = tree
        self._log_p_ref = np.log(self.reference_prices)
        self._node_share, self._levels = _compile(tree, self.shares)
        self._root = self.n_items  # node id of group 0

    @classmethod
    def calibrate(cls, base: BaseBudget, *, tree: Any = None, **_: Any) -> NestedCES:
        """Within-group weights come from the base shares; the caller gives the tree (items as
        positions, or by id in an :class:`ItemIdTree`)."""
        return cls(base.shares, base.prices, parse_tree(tree, base.n_items))

    # -- evaluation --------------------------------------------------------------------------
    def _log_relatives(self, prices: Vector) -> tuple[Vector, list[Vector]]:
        """ln P for every node (items first, then groups) and each level's within shares."""
        log_rel = np.empty(self._node_share.size)
        log_rel[: self.n_items] = np.log(prices) - self._log_p_ref
        within = []
        for level in self._levels:
            log_rel[level.nodes], w = _level_up(level, log_rel)
            within.append(w)
        return log_rel, within

    def _cost_and_shares(self, prices: Vector) -> tuple[float, Vector]:
        if np.array_equal(prices, self.reference_prices):
            # The calibration point: c(p0) = 1 and w(p0) = w0, exactly (the tree's products
            # of within-group weights give w0 only to rounding), and without a pass.
            return 1.0, self.shares.copy()
        log_rel, within = self._log_relatives(prices)
        node_w = np.empty(self._node_share.size)
        node_w[self._root] = 1.0
        for level, w in zip(reversed(self._levels), reversed(within), strict=True):
            node_w[level.child] = node_w[level.parent] * w
        return float(np.exp(log_rel[self._root])), node_w[: self.n_items]

    def _unit_cost(self, prices: Vector) -> float:
        """c(p) = P_root(p), the nested power mean of the price relatives; c(p0) = 1."""
        log_rel, _ = self._log_relatives(prices)
        return float(np.exp(log_rel[self._root]))

    def _budget_shares(self, prices: Vector) -> Vector:
        """w_i(p) = d ln c / d ln p_i: the product of current within-group shares on i's path."""
        return self._cost_and_shares(prices)[1]

    def group_cost_relatives(self, prices: Vector) -> Vector:
        """Each group's cost relative P_g(p), in the order of :meth:`groups`."""
        log_rel, _ = self._log_relatives(prices)
        return np.exp(log_rel[self.n_items :])

    # -- direct utility ----------------------------------------------------------------------
    @cached_property
    def _utility_plan(self) -> list[tuple[int, IndexArray, Vector, float]]:
        """Bottom-up list of (node, positive-weight children, their weights, sigma)."""
        n, share = self.n_items, self._node_share
        plan = []
        for g in range(len(self._tree.labels) - 1, -1, -1):
            if share[n + g] <= 0.0:
                continue
            kids = np.asarray([c for c in self._tree.children[g] if share[c] > 0.0], dtype=np.intp)
            plan.append((n + g, kids, share[kids] / share[n + g], self._tree.sigmas[g]))
        return plan

    def direct_utility(self, quantities: Vector) -> float:
        """u(x) = Z_root, nested power means of order (sigma_g - 1)/sigma_g (Sato 1967)."""
        x = _checks.nonnegative("x", quantities, size=self.n_items)
        log_z = np.full(self._node_share.size, -np.inf)
        used = (self.shares > 0.0) & (x > 0.0)
        log_z[: self.n_items][used] = np.log(
            self.reference_prices[used] * x[used] / self.shares[used]
        )
        for node, kids, weights, sigma in self._utility_plan:
            log_z[node] = log_quantity_mean(log_z[kids], weights, sigma)
        return float(np.exp(log_z[self._root]))

    # -- reporting -----------------------------------------------------------------------------
    @property
    def substitution_elasticity(self) -> float | None:
        """The common sigma when every group has the same one (the tree is then flat CES)."""
        sigmas = set(self._tree.sigmas)
        return sigmas.pop() if len(sigmas) == 1 else None

    def groups(self) -> list[dict[str, Any]]:
        """Each group, root first: its path, name, sigma, base share and its own items."""
        n, tree = self.n_items, self._tree
        # A parent's id is smaller than its children's: one pass spells every path.
        paths: list[str] = []
        for label, parent in zip(tree.labels, tree.parents, strict=True):
            paths.append(label if parent < 0 else f"{paths[parent]} > {label}")
        return [
            {
                "path": paths[g],
                "name": self._tree.labels[g],
                "sigma": self._tree.sigmas[g],
                "base_share": float(self._node_share[n + g]),
                "items": [c for c in self._tree.children[g] if c < n],
            }
            for g in range(len(self._tree.labels))
        ]

    def parameters(self) -> Mapping[str, Any]:
        return {"groups": self.groups(), "weights": self.shares.tolist()}

