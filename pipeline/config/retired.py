"""Setting names and values penduel no longer reads: refused with one paragraph naming what replaced them.

There are no silent aliases: an old config fails at once and says which key or value to write instead,
so no experiment runs on a setting it did not mean. Each entry names the old spelling (a dotted path)
and its replacement; the replacement's meaning is read from the schema, so it is written once.
"""
from __future__ import annotations

import json
from typing import Any

from ..selection import RULE_TABLE
from .experiment import ExperimentSpec
from .reference import variants

# old dotted key -> new dotted key
RETIRED_KEYS: dict[str, str] = {
    "families.l1.n_lambdas": "families.l1.path.points",
    "families.l1.lambda_ratio": "families.l1.path.smallest_share",
    "families.l1.alpha": "families.l1.l1_share",
    "families.l2.n_lambdas": "families.l2.path.points",
}

# dotted key -> {old value: new value}, and what each new value means (from its table)
RETIRED_VALUES: dict[str, dict[str, str]] = {
    "selection.rule": {"min": "least_error", "one_se": "one_standard_error"},
}
VALUE_MEANINGS: dict[str, dict[str, str]] = {
    "selection.rule": {name: rule.description for name, rule in RULE_TABLE.items()},
}


def _field(dotted: str):
    """The pydantic field at a dotted path of ExperimentSpec."""
    models, field = [ExperimentSpec], None
    for part in dotted.split("."):
        owner = next(m for m in models if part in m.model_fields)
        field = owner.model_fields[part]
        models = variants(field.annotation)
    return field


def _lookup(mapping: Any, dotted: str) -> tuple[bool, Any]:
    node = mapping
    for part in dotted.split("."):
        if not isinstance(node, dict) or part not in node:
            return False, None
        node = node[part]
    return True, node


def _nested(dotted: str, value: Any) -> str:
    """`families: {l1: {path: {points: 30}}}` for ('families.l1.path.points', 30)."""
    shown = value if isinstance(value, str) else json.dumps(value, ensure_ascii=False)
    text = f"{dotted.split('.')[-1]}: {shown}"
    for part in reversed(dotted.split(".")[:-1]):
        text = f"{part}: {{{text}}}"
    return text


def _meaning(dotted: str) -> str:
    text = (_field(dotted).description or "").rstrip(".")
    return text[:1].lower() + text[1:]


def retired_names(mapping: Any) -> list[str]:
    """One sentence per retired key or value found in a config mapping (empty when there is none)."""
    if not isinstance(mapping, dict):
        return []
    found = []
    for old, new in RETIRED_KEYS.items():
        present, value = _lookup(mapping, old)
        if present:
            found.append(f"'{old}' is a retired name; write '{new}' instead ({_meaning(new)}), e.g. "
                         f"`{_nested(new, value)}`.")
    for key, renamed in RETIRED_VALUES.items():
        present, value = _lookup(mapping, key)
        if present and isinstance(value, str) and value in renamed:
            new = renamed[value]
            found.append(f"'{key}: {value}' is a retired value; write '{key}: {new}' instead "
                         f"({VALUE_MEANINGS[key][new]}), e.g. `{_nested(key, new)}`.")
    return found


def retired_message(mapping: Any, source: str) -> str | None:
    """The one paragraph refusing every retired name in the mapping, or None."""
    found = retired_names(mapping)
    if not found:
        return None
    return (f"{source}: this config uses setting names penduel no longer reads — " + " ".join(found)
            + " Old names are refused rather than translated, so the file says what it means.")
