"""Reading the experiment file: safe YAML, validation, and one-paragraph messages naming the setting."""
from __future__ import annotations

import difflib
import math
import pathlib
from typing import Any

import yaml
from pydantic import BaseModel, ValidationError

from .experiment import ExperimentSpec
from .reference import kind_tags, variants
from .retired import retired_message


class ConfigError(ValueError):
    """A user mistake in the experiment file: one paragraph, shown without a traceback."""


def field_path(loc, model: type[BaseModel] = ExperimentSpec) -> str:
    """A pydantic error location as the user writes the setting: `features.maps[1].n_knots`.

    Walks the models: a segment is kept when it names a field; a union tag narrows to its
    branch and is dropped, as are validator and union-member segments; list positions
    count from 1.
    """
    path, models = "", [model]
    for part in loc:
        if isinstance(part, int):
            path += f"[{part + 1}]"
            continue
        tagged = [m for m in models if part in kind_tags(m)]
        if tagged:
            models = tagged
            continue
        owner = next((m for m in models if part in m.model_fields), None)
        if owner is None:
            continue
        path += f".{part}" if path else part
        models = variants(owner.model_fields[part].annotation)
    return path


def _describe(value: Any) -> str:
    """A short description: containers by kind and size, never rendered whole (they may be huge or recursive)."""
    if isinstance(value, dict):
        return f"a mapping of {len(value)} setting(s)"
    if isinstance(value, (list, tuple)):
        return f"a list of {len(value)} item(s)"
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


MAX_NODES = 20_000       # values in an expanded config file; a real experiment has a few hundred


def _check_values(value: Any, source: str) -> None:
    """Refuse alias bombs and recursive values (bounded walk) and non-finite numbers (named by setting)."""
    count, stack = 0, [(value, "", 0)]
    while stack:
        node, where, depth = stack.pop()
        count += 1
        if count > MAX_NODES or depth > 50:
            raise ConfigError(f"{source}: the file expands to more than {MAX_NODES:,} values or nests deeper than "
                              f"50 levels (YAML aliases (*name) repeating large blocks, or a value that contains "
                              f"itself); an experiment file holds a few hundred settings. Write the settings out "
                              f"plainly.")
        if isinstance(node, float) and not math.isfinite(node):
            raise ConfigError(f"{source}: field '{where or '(top level)'}' has value {node!r}; only finite numbers "
                              f"are allowed (.inf, .nan and their variants are not settings).")
        if isinstance(node, dict):
            stack += [(v, f"{where}.{k}" if where else str(k), depth + 1) for k, v in node.items()]
        elif isinstance(node, (list, tuple)):
            stack += [(v, f"{where}[{i + 1}]", depth + 1) for i, v in enumerate(node)]


def _allowed(model_error: dict) -> str:
    ctx = model_error.get("ctx") or {}
    if "expected" in ctx:
        return f"allowed: {ctx['expected']}"
    msg = model_error["msg"]
    return msg[:1].lower() + msg[1:]   # lower-casing all of it would garble a quoted pattern


def _closest(word: str, choices) -> str:
    match = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.5)
    return f" Did you mean {match[0]!r}?" if match else ""


def _format_validation(err: ValidationError, source: str) -> str:
    parts = []
    for e in err.errors()[:5]:
        if e["type"] == "extra_forbidden":   # the unknown key itself is no field: keep it by hand
            parent = field_path(e["loc"][:-1])
            loc = f"{parent}.{e['loc'][-1]}" if parent else str(e["loc"][-1])
            parts.append(f"field '{loc}' is not a known setting (found {_describe(e['input'])}).")
            continue
        loc = field_path(e["loc"])
        if e["type"] == "missing":
            parts.append(f"field '{loc}' is required but missing.")
            continue
        if e["type"] == "value_error" and (not loc or isinstance(e["input"], dict)):   # a rule across settings
            parts.append(f"{loc + ': ' if loc else ''}{(e.get('ctx') or {}).get('error', e['msg'])}.")
            continue
        hint = ""
        if e["type"] == "literal_error":
            expected = (e.get("ctx") or {}).get("expected", "")
            choices = [c.strip().strip("'") for c in expected.replace(" or ", ",").split(",") if c.strip()]
            hint = _closest(e["input"], choices)
        if e["type"] == "union_tag_invalid":   # an unknown kind: of a data source or a feature map
            ctx = e.get("ctx") or {}
            choices = [c.strip().strip("'") for c in str(ctx.get("expected_tags", "")).split(",")]
            hint = _closest(ctx.get("tag", ""), choices)
        parts.append(f"field '{loc}' has value {_describe(e['input'])}; {_allowed(e)}.{hint}")
    more = len(err.errors()) - 5
    if more > 0:
        parts.append(f"({more} more problem(s) not shown.)")
    return f"{source}: invalid experiment config — " + " ".join(parts)


def parse_config(mapping: Any, source: str = "config") -> ExperimentSpec:
    if not isinstance(mapping, dict):
        raise ConfigError(f"{source}: the file must hold a mapping of settings (name:, data:, ...), "
                          f"found {type(mapping).__name__}.")
    retired = retired_message(mapping, source)
    if retired:
        raise ConfigError(retired)
    _check_values(mapping, source)
    try:
        return ExperimentSpec.model_validate(mapping)
    except ValidationError as err:
        raise ConfigError(_format_validation(err, source)) from None


def load_yaml(path: str | pathlib.Path) -> Any:
    path = pathlib.Path(path)
    if path.is_dir():
        raise ConfigError(f"{path}: is a folder; give the experiment file itself (a .yaml file, e.g. one written "
                          f"by `penduel init`).")
    if not path.is_file():
        raise ConfigError(f"{path}: config file not found (looked for it at {path.resolve()}).")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: cannot read the config file ({exc}).") from None
    try:
        return yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc)
        raise ConfigError(f"{path}: YAML syntax error{where}: {problem}. Check indentation and quoting "
                          f"there.") from None


def load_config(path: str | pathlib.Path) -> tuple[ExperimentSpec, pathlib.Path]:
    """Validated spec and the folder relative paths in it are resolved against."""
    path = pathlib.Path(path)
    return parse_config(load_yaml(path), str(path)), path.resolve().parent
