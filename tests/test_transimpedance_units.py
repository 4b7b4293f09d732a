"""A transimpedance chain's gain is V/A: 20·log10|Vout/Iin| re 1 Ω, in dBΩ, not dB.
The photodiode demo's TIA has RF = 100 kΩ, so its gain is 20·log10(1e5) = 100 dBΩ
(the ideal transimpedance is RF: Graeme, *Photodiode Amplifiers*, from memory) less
the RC filter's 0.02 dB; every screen that prints it, and its requirements, says
dBΩ, while a margin or a spread (a ratio of two transimpedances) stays in dB."""
from __future__ import annotations

import json
import math

from conftest import REPO

TIA = REPO / "chains" / "photodiode_tia.yaml"


def _copy(tmp_path, text):
    (tmp_path / "parts").mkdir(exist_ok=True)
    (tmp_path / "parts" / "followers.yaml").write_text(
        (REPO / "chains" / "parts" / "followers.yaml").read_text(encoding="utf-8"), encoding="utf-8")
    f = tmp_path / "tia.yaml"
    f.write_text(text, encoding="utf-8")
    return f


def test_check_prints_requirements_in_dbohm(cli):
    rc, out, _ = cli("check", str(TIA))
    assert rc == 1                                   # the phase-margin requirement fails on purpose
    row = next(ln for ln in out.splitlines() if ln.startswith("min_gain"))
    assert "99.98 dBΩ" in row and "≥ 99.00 dBΩ" in row and "+0.98 dB " in row + " "
    assert "+0.98 dBΩ" not in row                   # a margin between two dBΩ figures is in dB
    rc, out, _ = cli("check", str(TIA), "--json")
    d = json.loads(out)
    r = next(x for x in d["specs"][0]["requirements"] if x["name"] == "min_gain")
    assert r["unit"] == "dBΩ"
    assert abs(r["value"] - 20 * math.log10(100e3)) < 0.05


def test_a_limit_may_be_written_in_dbohm_only_on_a_transimpedance_chain(cli, tmp_path):
    text = TIA.read_text(encoding="utf-8")
    assert "  - min_gain: 99 dB\n" in text
    f = _copy(tmp_path, text.replace("  - min_gain: 99 dB\n", "  - min_gain: 99.5 dBΩ\n"))
    rc, out, _ = cli("check", str(f))
    assert "≥ 99.50 dBΩ" in out
    volt = (REPO / "chains" / "ph_dosing_precision.yaml").read_text(encoding="utf-8")
    g = tmp_path / "volt.yaml"
    lines = volt.splitlines(keepends=True)
    i = lines.index("requirements:\n")
    g.write_text("".join(lines[:i + 1] + ["  - min_gain: 20 dBΩ\n"] + lines[i + 1:]), encoding="utf-8")
    rc, _, err = cli("check", str(g))
    assert rc == 2 and "Traceback" not in err
    assert f"volt.yaml:{i + 2}" in err and "dBΩ" in err and "write the limit in dB" in err


def test_spread_and_temperature_sweep_say_dbohm(cli):
    rc, out, _ = cli("spread", str(TIA), "-n", "40")
    row = next(ln for ln in out.splitlines() if ln.startswith("gain at f_ref"))
    assert row.count("dBΩ") == 5 and " dB " in row + " "     # nominal, mean, 3 percentiles; σ in dB
    noise = next(ln for ln in out.splitlines() if ln.startswith("input-referred noise"))
    assert "nA" in noise and "nV" not in noise               # a photocurrent's noise is a current
    rc, out, _ = cli("temperature", str(TIA))
    row = next(ln for ln in out.splitlines() if ln.startswith("gain at f_ref"))
    assert row.count("dBΩ") == 3 and row.rstrip().endswith("dB/K")
    rc, out, _ = cli("buffers", str(TIA))
    assert "end-to-end gain now +99.98 dBΩ" in " ".join(out.split())
