"""Hardening (issue 10): no input crashes chainplan, no output destroys a file, no
value silently turns into NaN.  Each defect found by the probe has a reproducer
here; files that can live in git are under tests/fixtures/hardening/."""
from __future__ import annotations

import math
import shutil

import numpy as np
import pytest

from chainplan.stages import REGISTRY
from chainplan.stages.base import UNIT_RANGES, Field
from conftest import REPO

HYDRO = REPO / "chains" / "hydrophone_buffered.yaml"
TIA = REPO / "chains" / "photodiode_tia.yaml"


@pytest.fixture
def project(tmp_path):
    """A copy of the demo chains (with their parts files) to change and write into."""
    shutil.copytree(REPO / "chains", tmp_path / "chains")
    return tmp_path / "chains"


def mutate(project, demo, old, new, name="mutant.yaml"):
    text = (REPO / "chains" / demo).read_text(encoding="utf-8")
    assert old in text, old
    text = text.replace(old, new, 1)
    path = project / name
    path.write_text(text, encoding="utf-8")
    line = text[:text.index(new)].count("\n") + 1 + new[:new.index(new.strip()[0])].count("\n")
    return str(path), line


def one_located_line(err: str, path: str, line: int, field: str):
    assert err.count("\n") == 1 and err.endswith("\n"), err
    assert f"{path}:{line}: {field}:" in err, err


# -- values near the float limits: refused with a located message ---------------

EXTREMES = [
    ("hydrophone_buffered.yaml", "gbw: 10 MHz ±30%", "gbw: 1e-308 Hz", "gain.gbw"),
    ("hydrophone_buffered.yaml", "length: 3 m", "length: 1e308 m", "lead.length"),
    ("hydrophone_buffered.yaml", "vdd: 3.3 V ±2%", "vdd: inf", "rails.vdd"),
    ("hydrophone_buffered.yaml", "vdd: 3.3 V ±2%", "vdd: 1e308 V", "rails.vdd"),
    ("hydrophone_buffered.yaml", "r_f: 39k ±1%", "r_f: 39k ±1e308%", "gain.r_f"),
    ("hydrophone_buffered.yaml", "r_f: 39k ±1%", "r_f: 39k ±1e308", "gain.r_f"),
    ("hydrophone_buffered.yaml", "en: 7 nV/√Hz", "en: 1e308 V/√Hz", "gain.en"),
    ("hydrophone_buffered.yaml", "c_in: 30 pF", "r_in: 1e-308", "adc.r_in"),
    ("hydrophone_buffered.yaml", "f_sample: 48 kHz", "f_sample: 5e-324 Hz", "adc.f_sample"),
    ("hydrophone_buffered.yaml", "fs_high: vdd", "fs_high: 5e-324 V", "adc.fs_high"),
    ("hydrophone_buffered.yaml", "r_bias: 2M", "r_bias: 1e-320", "follower.r_bias"),
    ("hydrophone_buffered.yaml", "temperature: 285 K", "temperature: 1e300 K", "temperature"),
    ("hydrophone_buffered.yaml", "f_stop: 10 MHz", "f_stop: 1e300 Hz", "analysis.f_stop"),
    ("photodiode_tia.yaml", "a0: 110 dB", "a0: 1e4 dB", "tia.a0"),
    ("photodiode_tia.yaml", "a0: 110 dB", "a0: 1e308 dB", "tia.a0"),
]


@pytest.mark.parametrize("demo, old, new, field", EXTREMES, ids=[e[2] for e in EXTREMES])
def test_a_value_outside_the_physical_range_is_one_located_error(cli, project, demo, old, new, field):
    path, line = mutate(project, demo, old, new)
    rc, out, err = cli("budget", path)
    assert rc == 2 and out == ""
    one_located_line(err, path, line, field)
    assert "nan" not in err and "Warning" not in err


@pytest.mark.parametrize("command", ["budget", "noise", "check"])
def test_values_at_the_edges_of_the_range_give_finite_figures(cli, project, command):
    """The largest accepted open-loop gain and the smallest gbw the range allows: a
    finite answer (or a located refusal), never 'nan'."""
    path, _ = mutate(project, "photodiode_tia.yaml", "a0: 110 dB", "a0: 400 dB\n    gbw: 1 µHz")
    text = open(path, encoding="utf-8").read().replace("    gbw: 10 MHz ±30%\n", "", 1)
    open(path, "w", encoding="utf-8").write(text)
    rc, out, err = cli(command, path, "--json")
    assert rc in (0, 1), err
    assert "NaN" not in out and "Infinity" not in out.replace('"f_high_hz": null', "") and err == ""


def test_every_field_has_a_finite_range_from_its_unit():
    """Fields added later get bounds without declaring any: the unit's range applies."""
    for kind, model in REGISTRY.items():
        for name, f in model.FIELDS.items():
            if f.unit == "choice":
                continue
            low, high, tiny = f.bounds()
            assert math.isfinite(low) and math.isfinite(high) and 0 < tiny < high, (kind, name)
            assert high * high < 1e300 or f.unit == "1", (kind, name)   # squares stay finite
    new = Field("ohm", "some new resistance", positive=True)
    assert new.bounds() == (UNIT_RANGES["ohm"][0], UNIT_RANGES["ohm"][1], UNIT_RANGES["ohm"][0])
    assert list(new.out_of_range(np.array([1e-308, 1.0, 1e308, np.inf, np.nan]))) == [True, False, True, True, True]


def test_the_schema_carries_the_range_of_a_numeric_value():
    from chainplan.spec.schema import field_schema
    s = field_schema(REGISTRY["cable"].FIELDS["length"])
    number = s["anyOf"][0]
    assert number["type"] == "number" and number["minimum"] == 1e-6 and number["maximum"] == 1e6
    assert "1 µm … 1 Mm" in s["description"]


def test_a_draw_outside_the_range_is_an_invalid_sample(tmp_path):
    """A ±1000 % tolerance (the widest accepted) draws values beyond the field's range:
    those samples are invalid, never NaN metrics."""
    from chainplan.spec.loader import load_chain_text
    from chainplan.studies import montecarlo as mc
    c = load_chain_text("name: t\nsource: {kind: sensor, amplitude: 1 mV, r: 1k}\nstages:\n"
                        "  - {name: r, kind: series_r, r: 1e14 ±1000% normal}\n"
                        "  - {name: m, kind: load, r_in: 1k}\n", "t.yaml")
    res = mc.run(c, 500, seed=3)
    assert (~res.valid).any() and np.isfinite(res.metrics["gain_db"]).all()
