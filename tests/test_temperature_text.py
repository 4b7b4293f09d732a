"""A temperature is printed as its author wrote it: a spec at 27 °C reads
'27 °C (300.15 K)', not 'at 300 K' (which is 26.85 °C).  Reference: the SI
definition of the Celsius scale, t/°C = T/K − 273.15 exactly."""
from __future__ import annotations

from conftest import REPO

from chainplan.spec.loader import load_chain
from chainplan.spec.numbers import celsius, temperature


def test_celsius_keeps_every_digit():
    assert celsius(273.15) == "0 °C"
    assert celsius(233.15) == "\u221240 °C"
    assert celsius(300.0) == "26.85 °C"            # 300 K is not 27 °C
    assert celsius(310.65) == "37.5 °C"


def test_temperature_as_written():
    assert temperature(300.15, "27 °C") == "27 °C (300.15 K)"
    assert temperature(300.15, "27 degC") == "27 °C (300.15 K)"
    assert temperature(298.15, "298.15 K") == "298.15 K"
    assert temperature(300.0, None) == "300 K"     # the default, 300 K, as the docs state it


def test_a_spec_at_27_celsius_says_so(cli, tmp_path):
    text = (REPO / "chains" / "photodiode_tia.yaml").read_text(encoding="utf-8")
    assert "temperature: 300 K\n" in text
    f = tmp_path / "warm.yaml"
    (tmp_path / "parts").mkdir()
    (tmp_path / "parts" / "followers.yaml").write_text(
        (REPO / "chains" / "parts" / "followers.yaml").read_text(encoding="utf-8"), encoding="utf-8")
    f.write_text(text.replace("temperature: 300 K\n", "temperature: 27 °C\n"), encoding="utf-8")
    chain = load_chain(str(f))
    assert chain.temp_k == 300.15 and chain.temp_text == "27 °C"
    rc, out, _ = cli("noise", str(f))
    assert rc == 0
    assert "at 27 °C (300.15 K)" in out and "at 300 K" not in out
    rc, out, _ = cli("noise", str(REPO / "chains" / "photodiode_tia.yaml"))
    assert rc == 0 and "at 300 K" in out
