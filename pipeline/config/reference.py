"""The config reference table (README) generated from the models, and their field structure."""
from __future__ import annotations

import json
import typing

from pydantic import BaseModel

from .experiment import ExperimentSpec


def _default_text(field) -> str:
    if field.is_required():
        return "required"
    value = field.default
    if isinstance(value, BaseModel):
        value = value.model_dump(mode="json")
    elif isinstance(value, tuple):
        value = [v.model_dump(mode="json") if isinstance(v, BaseModel) else v for v in value]
    return f"`{json.dumps(value, ensure_ascii=False)}`"


def variants(annotation) -> list[type[BaseModel]]:
    """Model classes inside an annotation such as Annotated[Union[A, B], ...] or tuple[...]."""
    found: list[type[BaseModel]] = []

    def visit(t):
        if isinstance(t, type) and issubclass(t, BaseModel):
            found.append(t)
            return
        for arg in typing.get_args(t):
            visit(arg)

    visit(annotation)
    return found


def kind_tags(model: type[BaseModel]) -> tuple[str, ...]:
    """The `kind` values that select this model in a tagged union (none when it has no kind)."""
    kind = model.model_fields.get("kind")
    return tuple(typing.get_args(kind.annotation)) if kind is not None else ()


def schema_reference() -> str:
    """Markdown table of every setting, generated from the models (the README embeds it)."""
    lines = ["| setting | default | meaning |", "| --- | --- | --- |"]

    def walk(model: type[BaseModel], prefix: str, note: str = "") -> None:
        for name, field in model.model_fields.items():
            path = f"{prefix}{name}"
            found = variants(field.annotation)
            is_list = "tuple" in str(field.annotation)
            if found and not (len(found) == 1 and not is_list and found[0] is field.annotation):
                lines.append(f"| `{path}` | {_default_text(field)} | {field.description or ''} |")
                for v in found:
                    tags = kind_tags(v)
                    label = f" (kind: {' or '.join(tags)})" if tags else ""
                    walk(v, f"{path}{'[]' if is_list else ''}.", label)
                continue
            if found:
                walk(found[0], path + ".")
                continue
            lines.append(f"| `{path}`{note} | {_default_text(field)} | {field.description or ''} |")

    walk(ExperimentSpec, "")
    return "\n".join(lines)
