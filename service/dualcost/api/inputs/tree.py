"""A nested CES tree from a request: groups whose children are item ids or further groups.

The same grouping arrives in a model (``{"name", "sigma", "children"}``: each group carries its
elasticity) and in a fit (``{"name", "children"}``: the sigmas are what the fit estimates). The
core takes it with item positions in place of item ids.
"""

from __future__ import annotations

from collections.abc import Collection
from typing import Any

from ..problems import FieldError, RequestProblem
from .items import ItemAxis


def tree_to_core(tree: Any, axis: ItemAxis, pointer: str, max_depth: int, *,
                 fields: Collection[str] | None) -> dict[str, Any]:
    """The tree with item ids replaced by positions; errors point into the request.

    ``fields`` are the keys a group may have besides ``children``: copied, and any other key is
    refused here. With ``None`` every key but ``children`` is copied unchecked (the core function
    that takes the tree checks them). Walks with an explicit stack, so depth costs no recursion.
    """
    if not isinstance(tree, dict):
        carries = "sigma and children" if fields is not None and "sigma" in fields else "children"
        raise RequestProblem([FieldError(pointer, f"must be a group: an object with {carries}")])
    root: dict[str, Any] = {}
    stack: list[tuple[dict[str, Any], dict[str, Any], str, int]] = [(tree, root, pointer, 1)]
    while stack:
        node, out, where, depth = stack.pop()
        if depth > max_depth:
            raise RequestProblem([FieldError(where, f"the tree is deeper than the limit of "
                                             f"{max_depth} levels")])
        if fields is None:
            out.update({k: v for k, v in node.items() if k != "children"})
        else:
            unknown = set(node) - {*fields, "children"}
            if unknown:
                key = sorted(unknown)[0]
                raise RequestProblem([FieldError(f"{where}/{key}", "is not a field of a group (a "
                                                 f"group has {', '.join(fields)} and children)")])
            out.update({k: node[k] for k in fields if k in node})
        children = node.get("children")
        if not isinstance(children, list):
            raise RequestProblem([FieldError(f"{where}/children", "must be a list of item ids "
                                             "and groups")])
        kids: list[Any] = []
        out["children"] = kids
        position = axis.position
        for j, child in enumerate(children):
            # The pointer is spelled out only for an error or a subgroup: trees have thousands
            # of items.
            if isinstance(child, str):
                where_item = position.get(child)
                if where_item is None:
                    raise RequestProblem([FieldError(f"{where}/children/{j}", f"{child!r} is not "
                                                     "an item id listed in items")])
                kids.append(where_item)
            elif isinstance(child, dict):
                sub: dict[str, Any] = {}
                kids.append(sub)
                stack.append((child, sub, f"{where}/children/{j}", depth + 1))
            else:
                raise RequestProblem([FieldError(f"{where}/children/{j}", "must be an item id or "
                                                 "a group")])
    return root
