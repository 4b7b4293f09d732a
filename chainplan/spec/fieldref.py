"""Markdown reference of every stage kind's fields, generated from the same
``FIELDS`` tables that validate specs, so docs/spec.md cannot drift.

    python -m chainplan.spec.fieldref docs/spec.md     # rewrite the generated part
"""
from __future__ import annotations

import sys

from ..stages import REGISTRY
from ..stages.base import alternative_text
from .loader import range_text
from .units import UNITS

BEGIN, END = "<!-- generated: stage fields (python -m chainplan.spec.fieldref docs/spec.md) -->", "<!-- end generated -->"


def _default(f) -> str:
    if f.required:
        return "**required**"
    if f.default is None:
        return "—"
    if isinstance(f.default, str):
        return f"`{f.default}`"
    return "no limit"


def _unit(f) -> str:
    if f.unit == "choice":
        return " / ".join(f"`{c}`" for c in f.choices)
    if f.unit == "sensitivity":
        return "signal per measurand unit (text)"
    u = UNITS[f.unit]
    extra = " or a rail name" if f.rail_ok else ""
    if f.choices:
        extra += " or " + " / ".join(f"`{c}`" for c in f.choices)
    return f"{u.quantity} ({u.symbol})" + extra if u.symbol else u.quantity + extra


def _range(f) -> str:
    """The accepted range (``Field.bounds``), as messages state it."""
    return "—" if f.unit in ("choice", "sensitivity") else range_text(f)


def markdown() -> str:
    out = [BEGIN, ""]
    for kind, model in REGISTRY.items():
        out.append(f"### `{kind}` — {model.title}")
        out.append("")
        for group in model.ONE_OF:
            sep = ", or " if any(not isinstance(g, str) for g in group) else ", "
            out.append("Give exactly one of " + sep.join(alternative_text(g, "`") for g in group) + ".")
            out.append("")
        out.append("| field | quantity | default | range | meaning |")
        out.append("|---|---|---|---|---|")
        for name, f in model.FIELDS.items():
            out.append(f"| `{name}` | {_unit(f)} | {_default(f)} | {_range(f)} | {f.doc} |")
        out.append("")
    out.append(END)
    return "\n".join(out)


def update(path: str) -> bool:
    """Rewrite the generated block of ``path``; True if it changed."""
    with open(path, encoding="utf-8") as fh:
        text = fh.read()
    head, _, rest = text.partition(BEGIN)
    _, _, tail = rest.partition(END)
    new = head + markdown() + tail
    if new != text:
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(new)
    return new != text


if __name__ == "__main__":
    for p in sys.argv[1:]:
        print(p, "updated" if update(p) else "up to date")
