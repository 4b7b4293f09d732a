"""The safety caution of a hazardous chain is in every output of every command:
the tables, --json, --markdown, --junit, the written files (common practice:
equipment touching mains, patients or high voltage defers to the applicable
standards, and every screen a reviewer might read alone says so)."""
from __future__ import annotations

import json
import shutil
import xml.etree.ElementTree as ET

import pytest

from conftest import REPO

WORDS = ("CAUTION", "mains-powered equipment", "licensed professional")


@pytest.fixture(scope="module")
def hazardous(tmp_path_factory):
    """The hydrophone chain (with candidate buffers and requirements) marked as mains-powered."""
    folder = tmp_path_factory.mktemp("hazard")
    shutil.copytree(REPO / "chains" / "parts", folder / "parts")
    text = (REPO / "chains" / "hydrophone_direct.yaml").read_text(encoding="utf-8")
    text = text.replace("temperature: 285 K", "temperature: 285 K\nhazards: [mains]", 1)
    path = folder / "mains.yaml"
    path.write_text(text, encoding="utf-8")
    return str(path)


def _has_caution(text: str) -> bool:
    flat = " ".join(text.split())
    return all(w in flat for w in WORDS)


def _json_caution(text: str) -> str:
    d = json.loads(text)
    return d["caution"] if "caution" in d else d["specs"][0]["caution"]


#: every command and format that writes to standard output
FORMATS = [
    ("budget",), ("budget", "--json"), ("budget", "--wide"),
    ("noise",), ("noise", "--json"),
    ("check",), ("check", "--json"), ("check", "--junit", "-"),
    ("spread", "-n", "50"), ("spread", "-n", "50", "--json"),
    ("compare", "{f}"), ("compare", "{f}", "--json"), ("compare", "{f}", "--markdown"),
    ("buffers",), ("buffers", "--json"), ("buffers", "--interface", "lead"),
    ("buffers", "--place"), ("buffers", "--place", "--json"),
    ("netlist",), ("accuracy",), ("accuracy", "--json"), ("temperature",), ("temperature", "--json"), ("power",), ("power", "--json"),
]


@pytest.mark.parametrize("args", FORMATS, ids=lambda a: " ".join(a).replace("{f}", "OLD"))
def test_every_output_of_a_hazardous_chain_carries_the_caution(cli, hazardous, args):
    argv = [args[0], hazardous] + [hazardous if a == "{f}" else a for a in args[1:]]
    rc, out, err = cli(*argv)
    assert rc in (0, 1), err
    if "--json" in args:
        assert _has_caution(_json_caution(out))
        assert "mains" in json.loads(out).get("hazards", ["mains"])
    elif "--junit" in args:
        suite = ET.fromstring(out[out.index("<testsuites"):]).find("testsuite")
        assert _has_caution(suite.find("properties/property").get("value"))
    else:
        assert _has_caution(out), out[:2000]


def test_written_files_carry_the_caution(cli, hazardous, tmp_path):
    """check --junit FILE, report, netlist -o and buffers --write: the file itself says it."""
    import os
    junit, html, cir = (str(tmp_path / n) for n in ("r.xml", "r.html", "c.cir"))
    new = os.path.join(os.path.dirname(hazardous), "new.yaml")      # beside it: its parts file stays inside
    assert cli("check", hazardous, "--junit", junit)[0] in (0, 1)
    suite = ET.parse(junit).getroot().find("testsuite")
    assert _has_caution(suite.find("properties/property").get("value"))
    assert cli("report", hazardous, "-o", html)[0] == 0
    assert _has_caution(open(html, encoding="utf-8").read())
    assert cli("netlist", hazardous, "-o", cir)[0] == 0
    assert _has_caution(open(cir, encoding="utf-8").read())
    rc, out, err = cli("buffers", hazardous, "--write", new)
    assert rc in (0, 1), err
    assert _has_caution(out)
    rc, out, _ = cli("budget", new)                 # the written spec keeps its hazards
    assert _has_caution(out)


def test_a_comparison_that_adds_a_hazard_carries_it(cli, hazardous):
    """Either side hazardous is enough: a change that makes a chain mains-powered says so."""
    plain = str(REPO / "chains" / "hydrophone_direct.yaml")
    rc, out, _ = cli("compare", plain, hazardous, "--markdown")
    assert rc == 0 and _has_caution(out)
    rc, out, _ = cli("compare", plain, plain, "--markdown")
    assert "CAUTION" not in out
