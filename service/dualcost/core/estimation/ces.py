"""CES and nested CES share equations for estimation (Arrow, Chenery, Minhas and Solow 1961;
Sato 1967).

Flat CES. With weights ``delta_i > 0`` and elasticity of substitution ``sigma``, the budget shares
are (Arrow et al. 1961, in share form)

    w_i(p) = delta_i p_i^(1 - sigma) / sum_j delta_j p_j^(1 - sigma),

a softmax of ``ln delta_i + (1 - sigma) ln p_i``. The free parameters are ``sigma`` and
``ln delta_i`` for every item but the last, whose ``ln delta`` is 0 (the scale of the weights is
not identified). The shares are fitted as they stand, by nonlinear least squares on the share
equations (see :mod:`.system`), not through the log-ratio form ``ln(w_i / w_n)``, so zero shares
are allowed.

Nested CES. Each group ``g`` of the tree has its own ``sigma_g`` and weights ``delta_c`` on its
children (items or subgroups); a group's price index is the weighted power mean of order
``1 - sigma_g`` of its children's, with weights ``delta / sum(delta)``:

    ln P_g = ln M_{1 - sigma_g}(P_c; delta),     s_{c|g} = delta_c P_c^(1 - sigma_g) / sum_k ...,

and an item's share is the product of the within-group shares ``s_{c|g}`` along its path from the
root (Sato 1967; Keller 1976). All groups are fitted jointly on the item shares, so the standard
errors of the groups' sigmas account for each other; each group's last child has ``ln delta = 0``.

Elasticities (Shephard's lemma on the same cost function): with ``W_c`` the total share of the
items under node ``c`` and ``r_g = 1 - sigma_g``,

    d ln w_i / d ln p_j = sum over the groups g on i's path, entered through child c, of
                          r_g (1[j under c] w_j / W_c - 1[j under g] w_j / W_g),

the Marshallian elasticity is that minus ``delta_ij``, and every expenditure elasticity is one
(homothetic preferences). For flat CES this is ``E_ij = (1 - sigma)(delta_ij - w_j) - delta_ij``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .._means import log_power_mean
from ..errors import InvalidInput
from ..preferences.nested_ces import FIT_TREE, parse_tree
from .panel import Panel
from .system import Array3, FitOptions, Label, Matrix, ShareSystem, Vector


def softmax_rows(logits: Matrix) -> Matrix:
    """``exp(z_i) / sum_j exp(z_j)`` along the last axis, shifted by the largest term first."""
    z = logits - np.max(logits, axis=-1, keepdims=True)
    e = np.exp(z)
    return e / np.sum(e, axis=-1, keepdims=True)


def _relative_price_spread(log_prices: Matrix, weights: Vector) -> Vector:
    """Weighted standard deviation over the sample of each ``ln(p_i / p_0)``."""
    rel = log_prices - log_prices[:, :1]
    w = weights / weights.sum()
    centred = rel - w @ rel
    return np.sqrt(w @ centred**2)


class CESShares(ShareSystem):
    """Flat CES: ``theta = (sigma, ln delta_1, ..., ln delta_{n-1})``."""

    family = "ces"
    method = "nonlinear least squares on the CES share equations"

    @classmethod
    def from_options(cls, n_items: int, options: FitOptions) -> CESShares:
        options.refuse_all_but(cls.family, cls.takes)
        return cls(n_items)

    def __init__(self, n_items: int) -> None:
        self.n_items = n_items
        self.labels = (Label("sigma"),) + tuple(Label("log_weight", (i,)) for i in range(n_items - 1))
        self.full_labels = (Label("sigma"),) + tuple(Label("log_weight", (i,)) for i in range(n_items))
        a = np.zeros((n_items + 1, n_items))
        a[:n_items, :n_items] = np.eye(n_items)
        self.full_map = (a, np.zeros(n_items + 1))

    def _logits(self, theta: Vector, log_prices: Matrix) -> Matrix:
        log_delta = np.append(theta[1:], 0.0)
        return log_delta + (1.0 - theta[0]) * log_prices

    def shares(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector) -> Matrix:
        return softmax_rows(self._logits(theta, log_prices))

    def jacobian(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector) -> Array3:
        """``dw_i/dsigma = -w_i (ln p_i - sum_j w_j ln p_j)``,
        ``dw_i/d ln delta_k = w_i (delta_ik - w_k)``."""
        w = self.shares(theta, log_prices, log_expenditure)
        n = self.n_items
        out = np.empty(w.shape + (n,))
        mean_lp = np.sum(w * log_prices, axis=1, keepdims=True)
        out[:, :, 0] = -w * (log_prices - mean_lp)
        out[:, :, 1:] = w[:, :, None] * (np.eye(n)[None, :, : n - 1] - w[:, None, : n - 1])
        return out

    def start(self, panel: Panel) -> Vector:
        """sigma from the pooled log-ratio regression where every share is positive, else 1."""
        omega = panel.weights / panel.weights.sum()
        mean_w = omega @ panel.shares
        sigma = 1.0
        if np.all(panel.shares > 0.0):
            y = np.log(panel.shares[:, :-1] / panel.shares[:, -1:])
            x = panel.log_prices[:, :-1] - panel.log_prices[:, -1:]
            y = y - omega @ y
            x = x - omega @ x
            sxx = float(omega @ np.sum(x * x, axis=1))
            if sxx > 0.0:
                sigma = 1.0 - float(omega @ np.sum(x * y, axis=1)) / sxx
        mean_lp = omega @ panel.log_prices
        log_delta = np.log(mean_w) - (1.0 - sigma) * mean_lp
        return np.concatenate([[sigma], log_delta[:-1] - log_delta[-1]])

    def spec(self, theta: Vector) -> dict[str, Any]:
        return {"sigma": float(theta[0])}

    def elasticities(self, theta: Vector, log_prices: Vector, log_expenditure: float
                     ) -> tuple[Vector, Vector, Matrix]:
        w = self.shares(theta, log_prices[None, :], np.array([log_expenditure]))[0]
        n = self.n_items
        r = 1.0 - float(theta[0])
        marshallian = r * (np.eye(n) - w[None, :]) - np.eye(n)
        return w, np.ones(n), marshallian

    def comparison_obstacle(self, theta: Vector) -> str | None:
        """A sigma below zero: no CES cost function has it (Arrow et al. 1961 need sigma >= 0)."""
        sigma = self.spec(theta)["sigma"]
        if sigma < 0.0:
            return (f"the estimated elasticity of substitution is {sigma:.6g}, below zero: no CES "
                    "cost function has it, so there is no Konüs index to compute")
        return None

    def check_identified(self, panel: Panel) -> None:
        if float(np.max(_relative_price_spread(panel.log_prices, panel.weights))) <= 1e-12:
            raise InvalidInput(
                "prices", "the relative prices of the items do not change over the sample "
                "(all prices move in proportion), so the elasticity of substitution cannot be "
                "estimated")


# -- nested CES --------------------------------------------------------------------------------


@dataclass(frozen=True)
class GroupTree:
    """A checked grouping of items. Group 0 is the root; every group's id exceeds its parent's.

    ``children[g]`` holds node ids: ``0..n-1`` are items, ``n + h`` is group ``h``.
    """

    n_items: int
    names: tuple[str, ...]
    parents: tuple[int, ...]
    children: tuple[tuple[int, ...], ...]

    @classmethod
    def parse(cls, spec: Any, n_items: int) -> GroupTree:
        """Check a grouping ``{"name", "children": [item | group, ...]}`` with no sigma (it is
        what the fit estimates) and two children or more per group, items as positions or, in an
        :class:`~dualcost.core.preferences.nested_ces.ItemIdTree`, by id. The tree reader is
        the nested CES family's (:func:`~dualcost.core.preferences.nested_ces.parse_tree`), so
        errors point into the tree the same way; groups are numbered in the order listed."""
        tree = parse_tree(spec, n_items, form=FIT_TREE)
        return cls(n_items, tree.labels, tree.parents, tree.children)

    @property
    def n_groups(self) -> int:
        return len(self.names)

    def items_under(self) -> Matrix:
        """Membership: ``M[node, j] = 1`` when item j is under node (items are under themselves)."""
        n, g_count = self.n_items, self.n_groups
        member = np.zeros((n + g_count, n))
        member[:n, :n] = np.eye(n)
        for g in reversed(range(g_count)):
            for c in self.children[g]:
                member[n + g] += member[c]
        return member


class NestedCESShares(ShareSystem):
    """Nested CES: ``theta`` holds each group's sigma, then each group's ``ln delta`` of all its
    children but the last."""

    family = "nested_ces"
    takes = frozenset({"tree"})
    method = "nonlinear least squares on the nested CES share equations, all groups jointly"

    @classmethod
    def from_options(cls, n_items: int, options: FitOptions) -> NestedCESShares:
        options.refuse_all_but(cls.family, cls.takes)
        return cls(GroupTree.parse(options.tree, n_items))

    def __init__(self, tree: GroupTree) -> None:
        self.tree = tree
        self.n_items = tree.n_items
        n = tree.n_items
        labels = [Label("sigma", group=name) for name in tree.names]
        full = list(labels)
        rows: list[int | None] = list(range(len(labels)))
        self._slots: list[list[int | None]] = []
        for kids in tree.children:
            slots: list[int | None] = []
            for j, c in enumerate(kids):
                label = (Label("log_weight", (c,)) if c < n
                         else Label("log_weight", group=tree.names[c - n]))
                full.append(label)
                if j < len(kids) - 1:
                    slots.append(len(labels))
                    rows.append(len(labels))
                    labels.append(label)
                else:
                    slots.append(None)
                    rows.append(None)
            self._slots.append(slots)
        self.labels = tuple(labels)
        self.full_labels = tuple(full)
        a = np.zeros((len(full), len(labels)))
        for r, k in enumerate(rows):
            if k is not None:
                a[r, k] = 1.0
        self.full_map = (a, np.zeros(len(full)))
        self._member = tree.items_under()

    def _log_weights(self, theta: Vector, g: int) -> Vector:
        return np.array([0.0 if k is None else theta[k] for k in self._slots[g]])

    def shares(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector) -> Matrix:
        tree, n = self.tree, self.n_items
        log_index: list[Vector] = [log_prices[:, i] for i in range(n)] + [
            np.empty(0)] * tree.n_groups
        within: list[Matrix] = [np.empty((0, 0))] * tree.n_groups
        for g in reversed(range(tree.n_groups)):
            x = np.column_stack([log_index[c] for c in tree.children[g]])
            log_delta = self._log_weights(theta, g)
            r = 1.0 - float(theta[g])
            log_index[n + g] = log_power_mean(x, softmax_rows(log_delta), r)
            within[g] = softmax_rows(log_delta + r * x)
        node_share: list[Vector] = [np.empty(0)] * (n + tree.n_groups)
        node_share[n] = np.ones(log_prices.shape[0])
        for g in range(tree.n_groups):
            for j, c in enumerate(tree.children[g]):
                node_share[c] = node_share[n + g] * within[g][:, j]
        return np.column_stack(node_share[:n])

    def start(self, panel: Panel) -> Vector:
        """Every sigma 1 (Cobb-Douglas within each group); weights from the mean shares."""
        omega = panel.weights / panel.weights.sum()
        node_w = self._member @ (omega @ panel.shares)
        theta = np.ones(self.n_parameters)
        for g, kids in enumerate(self.tree.children):
            log_w = np.log(node_w[list(kids)])
            for j, k in enumerate(self._slots[g]):
                if k is not None:
                    theta[k] = log_w[j] - log_w[-1]
        return theta

    def spec(self, theta: Vector) -> dict[str, Any]:
        tree, n = self.tree, self.n_items
        groups: list[dict[str, Any]] = [
            {"name": tree.names[g], "sigma": float(theta[g]), "children": []}
            for g in range(tree.n_groups)
        ]
        for g, kids in enumerate(tree.children):
            groups[g]["children"] = [c if c < n else groups[c - n] for c in kids]
        return {"tree": groups[0]}

    def elasticities(self, theta: Vector, log_prices: Vector, log_expenditure: float
                     ) -> tuple[Vector, Vector, Matrix]:
        tree, n = self.tree, self.n_items
        w = self.shares(theta, log_prices[None, :], np.array([log_expenditure]))[0]
        member = self._member
        node_w = member @ w
        parent_of = {c: g for g in range(tree.n_groups) for c in tree.children[g]}
        d = np.zeros((n, n))
        for i in range(n):
            node = i
            while node in parent_of:
                g = parent_of[node]
                r = 1.0 - float(theta[g])
                d[i] += r * (member[node] * w / node_w[node] - member[n + g] * w / node_w[n + g])
                node = n + g
        return w, np.ones(n), d - np.eye(n)

    def comparison_obstacle(self, theta: Vector) -> str | None:
        """The first group whose sigma is below zero: no nested CES cost function has it."""
        for label, value in zip(self.full_labels, self.full(theta), strict=True):
            if label.symbol == "sigma" and value < 0.0:
                return (f"the estimated sigma of group {label.group!r} is {float(value):.6g}, "
                        "below zero: no nested CES cost function has it")
        return None

    def check_identified(self, panel: Panel) -> None:
        n = self.n_items
        for g, name in enumerate(self.tree.names):
            under = np.flatnonzero(self._member[n + g])
            spread = _relative_price_spread(panel.log_prices[:, under], panel.weights)
            if float(np.max(spread)) <= 1e-12:
                raise InvalidInput(
                    "prices", f"the prices of the items in group {name!r} keep the same ratios "
                    "over the sample, so the group's elasticity of substitution cannot be "
                    "estimated")
