"""Golden files of the terminal screens: every command on every demo chain at 80 and
120 columns (fixed width, no colour), run in-process.

When an intended change alters these screens, regenerate them and read the diff:

    CHAINPLAN_UPDATE_GOLDEN=1 python -m pytest -q tests/test_golden.py
    git diff tests/golden/

Beside the exact text, every screen is checked for what must hold whatever the
numbers: no line wider than the width (at 80 and 120 columns, without --wide) and
no figure cut short with '…'."""
from __future__ import annotations

import os
import re

import pytest

from conftest import DEMO_CHAINS, REPO

GOLDEN = REPO / "tests" / "golden"
UPDATE = os.environ.get("CHAINPLAN_UPDATE_GOLDEN") == "1"
REGENERATE = "CHAINPLAN_UPDATE_GOLDEN=1 python -m pytest -q tests/test_golden.py"
WIDTHS = (80, 120)
CANDIDATES = {"hydrophone_buffered", "hydrophone_direct", "photodiode_tia", "piezo_charge_amp", "vibration_fanout"}


def _screens():
    """(file stem, arguments) of every screen pinned: each command on each demo chain."""
    out = []
    for path in DEMO_CHAINS:
        rel, name = f"chains/{path.name}", path.stem
        out += [(f"{name}.budget", ["budget", rel]), (f"{name}.noise", ["noise", rel]),
                (f"{name}.check", ["check", rel]), (f"{name}.spread", ["spread", "-n", "40", rel]),
                (f"{name}.compare", ["compare", rel, rel]), (f"{name}.accuracy", ["accuracy", rel]),
                (f"{name}.temperature", ["temperature", rel])]
        if name in CANDIDATES:
            out.append((f"{name}.buffers", ["buffers", rel]))
    out += [("hydrophone.compare", ["compare", "chains/hydrophone_direct.yaml", "chains/hydrophone_buffered.yaml"]),
            ("hydrophone_direct.place", ["buffers", "--place", "chains/hydrophone_direct.yaml"]),
            ("ph_probe_dc.budget-wide", ["budget", "--wide", "chains/ph_probe_dc.yaml"])]
    return out


SCREENS = _screens()
_TIME = re.compile(r"\d+(\.\d+)? s$")


def _normal(text: str) -> str:
    """Trailing blanks dropped; the search's wall-clock time masked."""
    lines = [_TIME.sub("<time> s", ln.rstrip()) if ln.startswith("search: ") else ln.rstrip()
             for ln in text.splitlines()]
    return "\n".join(lines) + "\n"


@pytest.mark.parametrize("width", WIDTHS)
@pytest.mark.parametrize("stem,args", SCREENS, ids=[s for s, _ in SCREENS])
def test_screen_matches_its_golden_file(stem, args, width, cli, monkeypatch):
    monkeypatch.chdir(REPO)
    monkeypatch.delenv("NO_COLOR", raising=False)
    rc, out, err = cli(*args, env={"COLUMNS": str(width)})
    assert rc in (0, 1) and err == "", err
    text = _normal(out)
    if "--wide" not in args:
        wide = [ln for ln in text.splitlines() if len(ln) > width]
        assert not wide, f"lines wider than {width} columns:\n" + "\n".join(wide)
    assert not re.search(r"\d…", text), "a number is cut short:\n" + text
    path = GOLDEN / str(width) / f"{stem}.txt"
    if UPDATE:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
        return
    assert path.exists(), f"no golden file {path.relative_to(REPO)}: create it with\n    {REGENERATE}"
    want = path.read_text(encoding="utf-8")
    if text != want:
        import difflib
        diff = "".join(difflib.unified_diff(want.splitlines(True), text.splitlines(True),
                                            f"golden/{width}/{stem}.txt", "now", n=1))
        pytest.fail(f"the screen of 'chainplan {' '.join(args)}' at {width} columns changed.\n"
                    f"If the change is intended, regenerate the golden files and read the diff:\n"
                    f"    {REGENERATE}\n\n{diff[:6000]}", pytrace=False)


def test_no_golden_file_is_left_over():
    """A golden file without a screen (a renamed chain, a dropped command) is stale."""
    want = {f"{w}/{s}.txt" for w in WIDTHS for s, _ in SCREENS}
    have = {f"{p.parent.name}/{p.name}" for p in GOLDEN.glob("*/*.txt")}
    assert not (have - want), f"stale golden files {sorted(have - want)}: delete them ({REGENERATE} rewrites the rest)"
