"""Hazardous chains carry the safety caution in every output a reviewer reads
(common practice: equipment touching patients, mains or high voltage defers
to the applicable standards and licensed practice)."""
from __future__ import annotations

import pytest

from conftest import REPO

ECG = str(REPO / "chains" / "ecg_patient_frontend.yaml")
PLAIN = str(REPO / "chains" / "vibration_fanout.yaml")


@pytest.mark.parametrize("args", [
    ["budget", ECG], ["noise", ECG], ["check", ECG], ["spread", ECG, "--samples", "200"],
    ["compare", ECG, ECG], ["netlist", ECG],
])
def test_every_text_output_of_a_patient_chain_carries_the_caution(cli, args):
    rc, out, err = cli(*args)
    assert rc in (0, 1), err
    flat = " ".join(out.split())
    assert "CAUTION" in flat and "patient connection" in flat and "licensed professional" in flat


def test_a_chain_without_hazards_carries_none(cli):
    rc, out, _ = cli("budget", PLAIN)
    assert rc == 0 and "CAUTION" not in out


def test_the_budget_json_names_the_hazard(cli):
    import json
    rc, out, _ = cli("budget", ECG, "--json")
    assert rc == 0 and json.loads(out)["hazards"] == ["patient"]


def test_machine_readable_outputs_carry_the_caution_too(cli):
    import json
    import xml.etree.ElementTree as ET
    rc, out, _ = cli("check", ECG, "--json")
    assert "patient connection" in json.loads(out)["specs"][0]["caution"]
    rc, out, _ = cli("budget", ECG, "--json")
    assert "patient connection" in json.loads(out)["caution"]
    rc, out, _ = cli("check", ECG, "--junit", "-")
    xml = out[out.index("<?xml") if "<?xml" in out else out.index("<testsuites"):]
    props = ET.fromstring(xml).find("testsuite/properties")
    assert props is not None and "patient connection" in props.find("property").get("value")
