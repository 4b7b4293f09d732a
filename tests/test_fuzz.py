"""Fuzz test of the promise (issue 10): any spec ends in exit 0/1 with finite figures,
or in exit 2 with one line naming the file and the line — never a traceback, an
internal error (exit 70), 'nan', or a numpy warning.

Hypothesis mutates the demo chains at two levels: the YAML tree (a value replaced
by an extreme number, a unit of another quantity, a list, a mapping, a long or
multi-line text; a key dropped, renamed or added; a stage dropped or doubled) and
the text (a line dropped, doubled or re-indented, characters inserted, a number
replaced).  Each case runs `budget`, `noise` and `check` in-process.

CI runs CHAINPLAN_FUZZ_EXAMPLES (default 150) derandomised examples per test (two tests:
tree and text), about 15 s.  The long run, 5000 random examples per test (10 000 cases):

    CHAINPLAN_FUZZ_EXAMPLES=5000 CHAINPLAN_FUZZ_COLLECT=1 python -m pytest -q -s tests/test_fuzz.py

prints its figures (cases, exit codes, findings) at the end, with one spec per
distinct finding (also written to the folder CHAINPLAN_FUZZ_FINDINGS names, if set); without CHAINPLAN_FUZZ_COLLECT hypothesis stops at the first
finding and shrinks it.
"""
from __future__ import annotations

import collections
import copy
import os
import re
import shutil
import tempfile

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from chainplan.cli import main
from conftest import DEMO_CHAINS, REPO

EXAMPLES = int(os.environ.get("CHAINPLAN_FUZZ_EXAMPLES", "150"))
LONG = EXAMPLES > 1000
SETTINGS = settings(max_examples=EXAMPLES, deadline=None, derandomize=not LONG, database=None,
                    suppress_health_check=list(HealthCheck), print_blob=True)
FIGURES: collections.Counter = collections.Counter()

_WORK = tempfile.mkdtemp(prefix="chainplan-fuzz-")
shutil.copytree(REPO / "chains", os.path.join(_WORK, "chains"))
SPEC = os.path.join(_WORK, "chains", "fuzzed.yaml")
TEXTS = {p.name: p.read_text(encoding="utf-8") for p in DEMO_CHAINS}

EXTREME_NUMBERS = [0, -1, 1e-308, 5e-324, 1e308, -1e308, float("inf"), float("-inf"), float("nan"), 1e-30,
                   1e30, 2 ** 63, -(2 ** 63), 1e15, 1e-15, 0.5, 3]
UNIT_TEXTS = ["1e-308 Hz", "1e308 m", "inf", "-inf", "nan", "1e4 dB", "1e308 V/√Hz", "±1e308%", "1 mV",
              "100 pF", "4.7k", "4k7", "1meg", "10 µA", "300 K", "-40 °C", "1e308", "5e-324 V", "10 Ω ±1e308%",
              "0.7 V ±50 mV normal", "vdd", "vmid", "nope", "1 MHz", "1e-300 F", "1e300 Ω", "0 Ω", "∞ Ω"]
ODD_VALUES = [None, True, [], {}, [1, 2], {"a": 1}, "", "x" * 5000, "a\nb", "\x00", "☃", [[[[]]]]]
VALUES = st.sampled_from(EXTREME_NUMBERS + UNIT_TEXTS + ODD_VALUES)
KEYS = st.sampled_from(["r", "c", "gain", "gbw", "a0", "bits", "from", "kind", "name", "f_sample", "fs_high",
                        "points", "include", "rails", "corners", "bogus", "<<", "1", "r_in", "length"])


def _paths(node, prefix=()):
    """Every (path, value) in the tree."""
    yield prefix, node
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, prefix + (i,))


def _parent(doc, path):
    for p in path[:-1]:
        doc = doc[p]
    return doc


@st.composite
def tree_mutants(draw):
    name = draw(st.sampled_from(sorted(TEXTS)))
    doc = yaml.safe_load(TEXTS[name])
    for _ in range(draw(st.integers(1, 3))):
        paths = [p for p, _ in _paths(doc) if p]
        path = draw(st.sampled_from(paths))
        parent = _parent(doc, path)
        what = draw(st.sampled_from(["value", "value", "value", "drop", "key", "double"]))
        if what == "value":
            parent[path[-1]] = copy.deepcopy(draw(VALUES))
        elif what == "drop":
            del parent[path[-1]]
        elif what == "key" and isinstance(parent, dict):
            parent[draw(KEYS)] = copy.deepcopy(draw(VALUES))
        elif what == "double" and isinstance(parent, list):
            parent.insert(path[-1], copy.deepcopy(parent[path[-1]]))
        if not isinstance(doc, dict) or not doc:
            break
    return name, yaml.safe_dump(doc, allow_unicode=True, sort_keys=False)


NUMBER = re.compile(r"(?<![\w.])\d+(\.\d+)?(?![\w.])")


@st.composite
def text_mutants(draw):
    name = draw(st.sampled_from(sorted(TEXTS)))
    lines = TEXTS[name].splitlines(keepends=True)
    for _ in range(draw(st.integers(1, 3))):
        i = draw(st.integers(0, len(lines) - 1))
        what = draw(st.sampled_from(["drop", "double", "indent", "insert", "number"]))
        if what == "drop":
            del lines[i]
        elif what == "double":
            lines.insert(i, lines[i])
        elif what == "indent":
            lines[i] = draw(st.sampled_from(["", " ", "   ", "\t"])) + lines[i].lstrip(" ")
        elif what == "insert":
            at = draw(st.integers(0, len(lines[i])))
            junk = draw(st.sampled_from(["[", "]", "{", "}", ":", "- ", "&a ", "*a", "!!str ", "#", "'", '"',
                                         "\\", "\x00", "\ufeff", "%", "±", "e308", "---\n"]))
            lines[i] = lines[i][:at] + junk + lines[i][at:]
        else:
            lines[i] = NUMBER.sub(draw(st.sampled_from(["1e308", "5e-324", "0", "-0", "1e-308", "999999999"])),
                                  lines[i], count=1)
        if not lines:
            break
    return name, "".join(lines)


#: what a finite answer never shows: nan/inf (any case), an infinite level, gain or ENOB (an
#: infinite impedance, '∞ Ω', is a fine answer), a Python warning or traceback
BAD_OUTPUT = re.compile(r"(?i:\bnan\b|\binf\b)|[−-]?∞ ?(V|dB|bits)|\w+Warning\b|Traceback")


#: CHAINPLAN_FUZZ_COLLECT=1 (the long run): record every broken promise and go on, instead of
#: stopping at the first; the findings are printed at the end, one example each
COLLECT = os.environ.get("CHAINPLAN_FUZZ_COLLECT") == "1"
FINDINGS: dict = {}


def check_promise(text: str, capsys):
    try:
        _check(text, capsys)
    except AssertionError as exc:
        if not COLLECT:
            raise
        key = re.sub(r"\d+(\.\d+)?", "N", str(exc).splitlines()[0])[:120]
        FIGURES["findings"] += 1
        if key not in FINDINGS and os.environ.get("CHAINPLAN_FUZZ_FINDINGS"):
            folder = os.environ["CHAINPLAN_FUZZ_FINDINGS"]
            os.makedirs(folder, exist_ok=True)
            with open(os.path.join(folder, f"finding{len(FINDINGS)}.yaml"), "w", encoding="utf-8") as fh:
                fh.write(f"# {key}\n{text}")
        FINDINGS.setdefault(key, text)


def _check(text: str, capsys):
    with open(SPEC, "w", encoding="utf-8", newline="") as fh:
        fh.write(text)
    for command in ("budget", "noise", "check"):
        rc = main([command, SPEC])
        out, err = capsys.readouterr()
        FIGURES[f"{command} exit {rc}"] += 1
        if rc in (0, 1):
            names = {n.lower().lstrip("+-−") for n in re.findall(r"name:\s*['\"]?([^\s,}'\"]+)", text)}
            bad = next((m for m in BAD_OUTPUT.finditer(out) if m.group().lower() not in names), None)
            assert not bad, f"non-finite figure in the output of {command}: " \
                            f"{out[out.rfind(chr(10), 0, bad.start()) + 1:].splitlines()[0].strip()}"
            assert err == "", err
        else:
            assert rc == 2, f"exit {rc}: {err}"
            assert err.count("\n") == 1 and err.startswith(f"chainplan: {SPEC}"), err
            assert re.match(rf"chainplan: {re.escape(SPEC)}(:\d+: |: (the file is larger))", err), \
                f"no line: {err}"
            break                                   # the other command reads the same spec


@SETTINGS
@given(tree_mutants())
def test_tree_mutations_keep_the_promise(capsys, case):
    FIGURES["cases"] += 1
    check_promise(case[1], capsys)


@SETTINGS
@given(text_mutants())
def test_text_mutations_keep_the_promise(capsys, case):
    FIGURES["cases"] += 1
    check_promise(case[1], capsys)


@pytest.fixture(scope="module", autouse=True)
def _report():
    yield
    if FIGURES:
        print("\nfuzz figures:", dict(sorted(FIGURES.items())))
    for key, text in FINDINGS.items():
        print(f"\n--- finding: {key}\n{text[:3000]}")
