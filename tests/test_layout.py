"""The package layout stays true: no import runs upward between the domains.

Layers, lowest first (DEVELOPERS.md, "Layout"): the foundation modules
(``errors``, ``constants``, ``version``), ``devices``, ``stages``, ``spec``, ``engine``,
``studies``, ``placement``, ``render``, then ``commands``/``cli``/``api``.
A module may import its own package and anything in a lower layer, with two
narrow exceptions written down here: the physics reads values through
``spec.units`` (the strict unit parser sits with the spec reader but depends on
nothing), and only ``commands`` (and ``render`` itself) may import render's
terminal code.  The walk reads every import statement with ``ast``, lazy
imports inside functions included.
"""
from __future__ import annotations

import ast
import pathlib

import pytest

PKG = pathlib.Path(__file__).resolve().parents[1] / "chainplan"

LAYERS = ["errors", "constants", "devices", "stages", "spec", "engine", "studies", "placement", "render",
          "commands"]
TOP = {"cli": "commands", "api": "commands", "__init__": "commands", "__main__": "commands", "version": "errors"}
#: Imports allowed against the layer order: (importing package, imported module).
EXCEPTIONS = {("devices", "chainplan.spec.units"), ("stages", "chainplan.spec.units")}
#: render's terminal code: only commands and render itself may import it.
TERMINAL = ("chainplan.render.console", "chainplan.render.tables", "chainplan.render.advisor_tables",
            "chainplan.render.check_tables", "chainplan.render.compare_tables", "chainplan.render.noise_tables",
            "chainplan.render.spread_tables")


def domain(modname: str) -> str:
    parts = modname.split(".")
    if len(parts) == 1:
        return "commands"
    head = parts[1]
    return TOP.get(head, head)


def module_name(path: pathlib.Path) -> str:
    rel = path.relative_to(PKG.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def imports_of(path: pathlib.Path):
    """(line, absolute module name) of every import in the file."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    me = module_name(path)
    is_pkg = path.name == "__init__.py"
    base = me.split(".") if is_pkg else me.split(".")[:-1]
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("chainplan"):
                    yield node.lineno, a.name
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                anchor = base[: len(base) - (node.level - 1)]
                target = ".".join(anchor + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if not target.startswith("chainplan"):
                continue
            if node.module is None or node.level and not node.module:
                for a in node.names:      # "from . import x": x may be a module
                    sub = f"{target}.{a.name}"
                    yield node.lineno, sub if (PKG.parent / (sub.replace(".", "/") + ".py")).exists() \
                        or (PKG.parent / sub.replace(".", "/")).is_dir() else target
            else:
                yield node.lineno, target


def violations(root: pathlib.Path = PKG):
    out = []
    for path in sorted(root.rglob("*.py")):
        me = module_name(path)
        mine = domain(me)
        for line, target in imports_of(path):
            theirs = domain(target)
            where = f"{path.relative_to(root.parent)}:{line}: {me} imports {target}"
            if target.startswith(TERMINAL) and mine not in ("commands", "render"):
                out.append(where + " (render's terminal code is for commands only)")
                continue
            if theirs == mine or (mine, target) in EXCEPTIONS:
                continue
            if mine not in LAYERS or theirs not in LAYERS:
                out.append(where + f" (unknown domain {mine!r} or {theirs!r}: add it to LAYERS)")
            elif LAYERS.index(theirs) > LAYERS.index(mine):
                out.append(where + f" (upward: {mine} → {theirs})")
    return out


def test_no_upward_import():
    assert violations() == []


def test_every_module_lives_in_a_domain():
    """No flat modules come back at the top of the package beside the foundation."""
    flat = sorted(p.stem for p in PKG.glob("*.py"))
    assert flat == ["__init__", "__main__", "api", "cli", "constants", "errors", "version"]


@pytest.mark.parametrize("src,expect", [
    ("from ..engine.budget import analyse\n", "upward: stages → engine"),
    ("def f():\n    from ..render.tables import eng\n", "terminal code"),
    ("from ..placement import advisor\n", "upward: stages → placement"),
])
def test_the_walk_catches_an_upward_import(tmp_path, src, expect):
    """The check fails when an upward import is added (a copy of the package with one bad line)."""
    import shutil
    copy = tmp_path / "chainplan"
    shutil.copytree(PKG, copy, ignore=shutil.ignore_patterns("__pycache__"))
    target = copy / "stages" / "passive.py"
    target.write_text(target.read_text(encoding="utf-8") + "\n" + src, encoding="utf-8")
    found = [v for v in _violations_in(copy) if "passive.py" in v]
    assert found and expect in found[0]


def _violations_in(root):
    global PKG
    saved, PKG = PKG, root
    try:
        return violations(root)
    finally:
        PKG = saved
