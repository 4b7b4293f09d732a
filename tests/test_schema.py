"""The JSON Schema of chain specs: valid draft-07, up to date in docs/, accepts every
demo chain, rejects broken ones, and agrees with chainplan's own value parser on
typical texts (validated with the ``jsonschema`` package, a test dependency)."""
from __future__ import annotations

import copy
import json

import pytest
import yaml

from chainplan.spec.schema import chain_schema, dumps, unit_pattern
from chainplan.spec.units import UnitError, parse_toleranced
from conftest import DEMO_CHAINS, REPO

jsonschema = pytest.importorskip("jsonschema")


@pytest.fixture(scope="module")
def validator():
    schema = chain_schema()
    jsonschema.Draft7Validator.check_schema(schema)
    return jsonschema.Draft7Validator(schema)


def test_docs_copy_is_up_to_date():
    path = REPO / "docs" / "chain.schema.json"
    assert path.read_text(encoding="utf-8") == dumps(), \
        "docs/chain.schema.json is stale: run 'chainplan schema -o docs/chain.schema.json'"


@pytest.mark.parametrize("path", DEMO_CHAINS, ids=lambda p: p.stem)
def test_every_demo_chain_validates(validator, path):
    doc = yaml.safe_load(path.read_text(encoding="utf-8"))
    errors = [f"{list(e.path)}: {e.message}" for e in validator.iter_errors(doc)]
    assert not errors


def _demo(name):
    return yaml.safe_load((REPO / "chains" / f"{name}.yaml").read_text(encoding="utf-8"))


def _broken(doc, where, mutate):
    doc = copy.deepcopy(doc)
    mutate(doc)
    return doc, where


BROKEN = {
    "volts for a resistance": (lambda d: d["stages"][1].__setitem__("r_g", "1 V"), ["stages", 1, "r_g"]),
    "unknown prefix": (lambda d: d["stages"][1].__setitem__("r_f", "4.7q"), ["stages", 1, "r_f"]),
    "unknown kind": (lambda d: d["stages"][1].__setitem__("kind", "opamp_noninvertng"), ["stages", 1, "kind"]),
    "unknown field": (lambda d: d["stages"][0].__setitem__("wl", 20), ["stages", 0]),
    "missing required field": (lambda d: d["stages"][2].pop("bits"), ["stages", 2]),
    "both bias choices": (lambda d: d["stages"][0].__setitem__("r_s", "10k"), ["stages", 0]),
    "aspect ratio and width": (lambda d: d["stages"][0].__setitem__("w", "100u"), ["stages", 0]),
    "width and length beside the aspect ratio": (lambda d: d["stages"][0].update(w="100u", l="5u"), ["stages", 0]),
    "length without width": (lambda d: (d["stages"][0].pop("w_over_l"), d["stages"][0].__setitem__("l", "5u")),
                             ["stages", 0]),
    "unknown top-level key": (lambda d: d.__setitem__("stagess", []), []),
    "unknown hazard": (lambda d: d.__setitem__("hazards", ["radiation"]), ["hazards"]),
    "current for the bulk": (lambda d: d["stages"][0].__setitem__("bulk", "3 A"), ["stages", 0, "bulk"]),
    "points not whole": (lambda d: d["analysis"].__setitem__("points", 40.5), ["analysis", "points"]),
}


@pytest.mark.parametrize("case", BROKEN, ids=list(BROKEN))
def test_a_broken_chain_is_rejected_where_it_is_broken(validator, case):
    mutate, where = BROKEN[case]
    doc = copy.deepcopy(_demo("ph_probe_dc"))
    mutate(doc)
    errors = list(validator.iter_errors(doc))
    assert errors, case
    assert any(list(e.path)[:len(where)] == where for e in errors), [list(e.path) for e in errors]


# Value texts and whether chainplan's parser takes them for the unit (units.py is the reference).
TEXTS = [
    ("ohm", "4.7 kΩ"), ("ohm", "4.7k"), ("ohm", "1meg"), ("ohm", "10k ohm"), ("ohm", "470"), ("ohm", "1 V"),
    ("ohm", "4.7q"), ("ohm", "10k ±1%"), ("ohm", "10k +-1 % normal"), ("F", "100pF"), ("F", "2.2µ"),
    ("F", "100 mF"), ("F", "3 H"), ("V", "0.55 V ±50m"), ("V", "−1.2 V"), ("V", "1.2 A"), ("Hz", "10 MHz"),
    ("Hz", "10 Mhz"), ("A/V2", "200 µA/V²"), ("sqrtV", "0.45 √V"), ("1/V", "0.04 /V"), ("1/V", "20m"),
    ("K", "27 °C"), ("K", "300 K"), ("F/m", "90 pF/m"), ("V/rtHz", "4 nV/√Hz"), ("dB", "110 dB"),
    ("dB", "110 mdB"), ("1", "100x"), ("m", "3 m"), ("m", "50 cm"),
    ("m", "2 µm"), ("m", "100u"), ("m", "180 nm"),
]


@pytest.mark.parametrize("unit,text", TEXTS)
def test_value_pattern_agrees_with_the_parser(unit, text):
    import re
    try:
        parse_toleranced(text, unit)
        ok = True
    except UnitError:
        ok = False
    assert bool(re.match(unit_pattern(unit, allow_inf=True, tolerable=True), text)) == ok


def test_width_and_length_instead_of_the_aspect_ratio_validate(validator):
    doc = copy.deepcopy(_demo("ph_probe_dc"))
    doc["stages"][0].pop("w_over_l")
    doc["stages"][0].update(w="100 µm", l="5u")
    assert not list(validator.iter_errors(doc))


def test_cli_prints_the_schema(cli):
    rc, out, err = cli("schema")
    assert rc == 0 and json.loads(out)["title"] == "chainplan chain spec"
