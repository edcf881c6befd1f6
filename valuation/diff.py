"""Structured difference between two model documents.

Lists of named items (states, alternatives, studies, nodes, branches) are
matched by their stable key (``id`` for nodes, ``name`` for states,
alternatives and studies, ``label`` for branches), so reordering a list is not a
change and a renamed item shows as one removal plus one addition. Every other
list is compared position by position.

Pure Python: no Django, no I/O.
"""

from __future__ import annotations

from typing import Any

__all__ = ["diff_documents", "leaf_paths"]

_KEYS = ("id", "name", "label")
_MISSING = object()


def _key_field(items: list) -> str | None:
    """The field that names every item of ``items`` uniquely, if there is one."""
    if not items or not all(isinstance(item, dict) for item in items):
        return None
    for key in _KEYS:
        values = [item.get(key, _MISSING) for item in items]
        if all(isinstance(v, str) for v in values) and len(set(values)) == len(values):
            return key
    return None


def _same(a: Any, b: Any) -> bool:
    # 1 and 1.0 are the same number in a model document; True is not 1.
    if isinstance(a, bool) or isinstance(b, bool):
        return type(a) is type(b) and a == b
    if isinstance(a, int | float) and isinstance(b, int | float):
        return float(a) == float(b)
    return type(a) is type(b) and a == b


def _walk(old: Any, new: Any, path: str, out: list[dict]) -> None:
    if isinstance(old, dict) and isinstance(new, dict):
        for key in sorted(old.keys() | new.keys()):
            sub = f"{path}.{key}" if path else key
            if key not in new:
                out.append({"path": sub, "change": "removed", "old": old[key], "new": None})
            elif key not in old:
                out.append({"path": sub, "change": "added", "old": None, "new": new[key]})
            else:
                _walk(old[key], new[key], sub, out)
        return
    if isinstance(old, list) and isinstance(new, list):
        key_old, key_new = _key_field(old), _key_field(new)
        key = key_old or key_new
        if key and (not old or key_old == key) and (not new or key_new == key):
            old_by = {item[key]: item for item in old}
            new_by = {item[key]: item for item in new}
            for name in [*old_by, *(n for n in new_by if n not in old_by)]:
                sub = f"{path}[{key}={name}]"
                if name not in new_by:
                    out.append({"path": sub, "change": "removed", "old": old_by[name], "new": None})
                elif name not in old_by:
                    out.append({"path": sub, "change": "added", "old": None, "new": new_by[name]})
                else:
                    _walk(old_by[name], new_by[name], sub, out)
            return
        for i in range(max(len(old), len(new))):
            sub = f"{path}[{i}]"
            if i >= len(new):
                out.append({"path": sub, "change": "removed", "old": old[i], "new": None})
            elif i >= len(old):
                out.append({"path": sub, "change": "added", "old": None, "new": new[i]})
            else:
                _walk(old[i], new[i], sub, out)
        return
    if not _same(old, new):
        out.append({"path": path or "$", "change": "changed", "old": old, "new": new})


def _category(path: str) -> str:
    last = path.rsplit(".", 1)[-1]
    if "probability" in last or ".likelihoods" in path:
        return "probabilities"
    if ".payoffs" in path or last.startswith(("payoff", "cash_flow", "cost")):
        return "payoffs"
    if last.startswith(("nodes[", "branches[", "states[", "alternatives[", "studies[")):
        return "structure"
    return "other"


def diff_documents(old: dict, new: dict) -> dict:
    """Compare two model documents.

    Returns
    -------
    dict
        ``{"identical": bool, "changes": [{"path", "change", "old", "new", "category"}],
        "summary": {"probabilities": n, "payoffs": n, "structure": n, "other": n},
        "nodes": {"added": [...], "removed": [...], "changed": [...]}}``, where
        ``change`` is ``"added"``, ``"removed"`` or ``"changed"`` and ``category``
        says whether a probability, a payoff (or cost / cash flow), the structure
        (an item added or removed) or something else moved. ``nodes`` names the
        tree nodes touched (empty for payoff tables).

    Examples
    --------
    >>> a = {"states": [{"name": "hot", "probability": 0.4}]}
    >>> b = {"states": [{"name": "hot", "probability": 0.5}]}
    >>> diff_documents(a, b)["changes"][0]["path"]
    'states[name=hot].probability'
    """
    changes: list[dict] = []
    _walk(old, new, "", changes)
    summary = {"probabilities": 0, "payoffs": 0, "structure": 0, "other": 0}
    nodes: dict[str, list[str]] = {"added": [], "removed": [], "changed": []}
    for change in changes:
        change["category"] = _category(change["path"])
        summary[change["category"]] += 1
        if change["path"].startswith("nodes[id="):
            node_id = change["path"][len("nodes[id="):].split("]", 1)[0]
            whole = change["path"] == f"nodes[id={node_id}]"
            bucket = change["change"] if whole else "changed"
            if node_id not in nodes[bucket]:
                nodes[bucket].append(node_id)
    return {"identical": not changes, "changes": changes, "summary": summary, "nodes": nodes}


def leaf_paths(doc: Any, path: str = "") -> dict[str, Any]:
    """Every scalar of ``doc`` by the path :func:`diff_documents` would report it under."""
    out: dict[str, Any] = {}
    if isinstance(doc, dict):
        for key, value in doc.items():
            out.update(leaf_paths(value, f"{path}.{key}" if path else key))
    elif isinstance(doc, list):
        key = _key_field(doc)
        for i, item in enumerate(doc):
            out.update(leaf_paths(item, f"{path}[{key}={item[key]}]" if key else f"{path}[{i}]"))
    else:
        out[path or "$"] = doc
    return out
