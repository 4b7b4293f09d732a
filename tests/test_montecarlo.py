"""Tolerance Monte Carlo: statistics against the first-order propagation of
uncertainty, nominal equivalence, reproducibility, per-sample validity,
rails and corners, the ranking, and the spread command."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from chainplan.studies import montecarlo as mc
from chainplan.engine.budget import analyse
from chainplan.errors import SpecError
from chainplan.studies.tolerances import at_corners, corner_points, draw
from conftest import chain_from

DIVIDER = """
name: divider
source: {{kind: sensor, amplitude: 1 V}}
stages:
  - {{name: div, kind: divider, r_top: "{ra}", r_bottom: "{rb}"}}
  - {{name: out, kind: load}}
analysis: {{f_ref: 1 kHz, f_start: 10 Hz, f_stop: 100 kHz, points: 20}}
"""


def divider(ra="10k ±1%", rb="10k ±1%"):
    return chain_from(DIVIDER.format(ra=ra, rb=rb))


def _truncated_sd(a=3.0):
    """Standard deviation of a standard normal truncated at ±a, in units of the limit a:
    √(1 − 2a·φ(a)/(2Φ(a) − 1))/a (truncated-normal variance, any statistics handbook, from memory)."""
    phi = math.exp(-a * a / 2) / math.sqrt(2 * math.pi)
    big = 0.5 * (1 + math.erf(a / math.sqrt(2)))
    return math.sqrt(1 - 2 * a * phi / (2 * big - 1)) / a


@pytest.mark.parametrize("dist,k", [("σ", 1.0), ("normal", _truncated_sd()), ("uniform", 1 / math.sqrt(3))])
def test_divider_variance_matches_first_order_propagation(dist, k):
    """Law of propagation of uncertainty, u²(G) = Σ (∂G/∂x_i)²·u²(x_i) (GUM, JCGM 100:2008,
    eq. 10, from memory), for G = Rb/(Ra + Rb); 1 % of 10 kΩ as one sigma ('σ'), as a limit
    at 3σ truncated there ('normal'), or as the half-width of a uniform distribution,
    u = w/√3 (GUM 4.3.7, from memory)."""
    ra, rb = 10e3, 4.7e3
    c = divider(f"10k ±1% {dist}", f"4.7k ±1% {dist}")
    n = 40_000
    res = mc.run(c, n, seed=11)
    g = 10 ** (res.metrics["gain_db"] / 20)
    dg_dra, dg_drb = -rb / (ra + rb) ** 2, ra / (ra + rb) ** 2
    var = (dg_dra * 0.01 * ra * k) ** 2 + (dg_drb * 0.01 * rb * k) ** 2
    # sampling error of a variance estimate: sd(s²) = σ²·sqrt(2/(n−1)) for a normal output
    # (a uniform-input output is flatter-tailed, so this bound is conservative); 5 sd band,
    # plus 1e-3 relative for the neglected second-order terms (of order (1 %)²)
    band = 5 * math.sqrt(2 / (n - 1)) + 1e-3
    assert g.var(ddof=1) == pytest.approx(var, rel=band)
    assert g.mean() == pytest.approx(rb / (ra + rb), abs=5 * math.sqrt(var / n) + 1e-6)


def test_nominal_sample_equals_the_budget():
    c = chain_from("""
        name: mixed
        rails: {vdd: 3.3 V ±2%}
        source: {kind: sensor, amplitude: 50 mV ±5%, dc: 1.2 V, r: 20k ±10%, c: 1 nF}
        stages:
          - {name: sf, kind: source_follower, kp: 100 µA/V², w_over_l: 20, vth0: 0.6 V ±50 mV normal,
             lambda: 0.05 /V, gamma: 0.5 √V, phi: 0.7 V, i_bias: 10 µA ±10%, v_compliance: 0.1 V}
          - {name: amp, kind: opamp_noninverting, gbw: 1 MHz ±20%, r_f: 3k ±1%, r_g: 1k ±1%, cm_low: 0.3 V}
          - {name: lp, kind: rc_lowpass, r: 1k ±1%, c: 10 nF ±10%}
          - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd}
        corners: {temperature: [0 °C, 50 °C], supply: ±5 %}
        analysis: {f_ref: 1 kHz, f_start: 1 Hz, f_stop: 10 MHz, points: 120}
    """)
    d = draw(c, 3, seed=5)
    for key in d.assign:                                   # every varied value back at nominal
        st, fld = key
        nominal = c.stage(st).params[fld]
        d.assign[key] = np.full(3, nominal)
    res = mc.run_draws(d)
    b = analyse(c)
    m = res.metrics
    assert np.allclose(m["gain_db"], b.gain_db, rtol=0, atol=1e-12)
    assert np.allclose(m["f_high_hz"], b.f_high_hz, rtol=1e-12)
    for row in b.interfaces:
        assert np.allclose(m[f"loading_loss_db.{row.to}"], row.loss_db, rtol=0, atol=1e-12)
    for node in b.nodes:
        assert np.allclose(m[f"headroom_v.{node.name}"], node.headroom_v, rtol=0, atol=1e-12)
    assert res.valid.all()


def test_same_seed_same_numbers_regardless_of_chunking():
    c = divider("10k ±5%", "10k ±1% normal")
    a = mc.run(c, 3000, seed=42, workers=1)
    b = mc.run(c, 3000, seed=42, chunk=700, workers=3)
    other = mc.run(c, 3000, seed=43)
    assert np.array_equal(a.metrics["gain_db"], b.metrics["gain_db"])
    assert a.sensitivity == b.sensitivity
    assert not np.array_equal(a.metrics["gain_db"], other.metrics["gain_db"])


def test_ranking_follows_the_variance_shares():
    """Equal resistors: |∂G/∂Ra| = |∂G/∂Rb|, so the shares go as u², 25 : 1 (first-order
    propagation, GUM JCGM 100:2008 eq. 10, from memory)."""
    res = mc.run(divider("10k ±5% normal", "10k ±1% normal"), 20_000, seed=3)
    (top, s_top), (second, s_second) = res.sensitivity
    assert (top, second) == ("div.r_top", "div.r_bottom")
    assert s_top == pytest.approx(25 / 26, abs=0.01) and s_second == pytest.approx(1 / 26, abs=0.01)


FOLLOWER = """
name: sf
rails: {vdd: 3.3 V}
source: {kind: sensor, amplitude: 10 mV, dc: 1.2 V}
stages:
  - {name: sf, kind: source_follower, kp: 100 µA/V², w_over_l: 20, vth0: "0.6 V ±0.6 V", bulk: source,
     i_bias: 10 µA, v_compliance: 0.1 V}
  - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd}
requirements:
  - min_gain: -60 dB
analysis: {f_ref: 1 kHz, f_start: 10 Hz, f_stop: 100 kHz, points: 20}
"""


def test_impossible_operating_points_count_as_failures_sample_by_sample():
    """With Vth spread ±0.6 V some samples leave the sink without compliance; each
    sample's validity must match a single nominal analysis at that sample's Vth."""
    c = chain_from(FOLLOWER)
    res = mc.run(c, 400, seed=2)
    assert 0 < res.valid.sum() < 400
    vth = res.inputs["sf.vth0"]
    for i in np.linspace(0, 399, 25).astype(int):
        single = chain_from(FOLLOWER.replace('"0.6 V ±0.6 V"', f"{float(vth[i])!r} V"))
        try:
            analyse(single)
            ok = True
        except SpecError:
            ok = False
        assert bool(res.valid[i]) == ok, (i, vth[i])
    (req,) = res.requirements
    assert not req.passed[~res.valid].any()
    assert res.yield_all == pytest.approx((req.passed & res.valid).mean())


def test_a_rail_tolerance_moves_every_user_together_and_supply_corners_scale_rails():
    c = chain_from("""
        name: rails
        rails: {vdd: 5 V ±2%, vref: 2.5 V}
        source: {kind: sensor, amplitude: 10 mV, dc: vref}
        stages:
          - {name: a1, kind: opamp_follower, gbw: 1 MHz, v_pos: vdd}
          - {name: a2, kind: opamp_follower, gbw: 1 MHz, v_pos: vdd}
          - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd}
        corners: {supply: ±10 %, rails: [vdd]}
    """)
    d = draw(c, 1000, seed=1)
    vdd = d.assign[("a1", "v_pos")]
    assert np.array_equal(vdd, d.assign[("a2", "v_pos")]) and np.array_equal(vdd, d.assign[("adc", "fs_high")])
    assert np.array_equal(vdd, d.inputs["rails.vdd"])      # a unit's rail: its regulator's tolerance
    corners = corner_points(c)
    assert [k.supply for k in corners] == [1.0, 0.9, 1.1]
    p = at_corners(d, slice(0, 1000), corners)             # every unit at every corner, unit-major
    for st in ("a1", "a2"):
        np.testing.assert_allclose(p[st]["v_pos"][:, 0], np.repeat(vdd, 3) * np.tile([1.0, 0.9, 1.1], 1000))
    assert np.ndim(p["sensor"]["dc"]) == 0                 # vref is not moved by the supply corner


def test_corners_block_parses_and_rejects_nonsense():
    base = "name: t\nrails: {vdd: 3 V}\nsource: {kind: sensor, amplitude: 1 V}\nstages: [{name: l, kind: load}]\n"
    c = chain_from(base + "corners: {temperature: 25 °C ±25 °C}\n")
    assert c.extra["corners"].temp_k == pytest.approx((273.15, 323.15))
    # the nominal first: the default 300 K is 26.85 °C (t/°C = T/K − 273.15), not "27 °C"
    assert [k.label for k in corner_points(c)] == ["26.85 °C", "0 °C", "50 °C"]
    for text, msg in (("corners: {supply: 5 V}", "percentage"), ("corners: {temperature: [50 °C, 0 °C]}", "low"),
                      ("corners: {supply: ±5 %, rails: [vcc]}", "not a declared rail"),
                      ("corners: {heat: 1}", "unknown key")):
        with pytest.raises(SpecError, match=msg):
            chain_from(base + text + "\n")


def test_an_out_of_range_draw_is_drawn_again_not_a_failure():
    c = divider("10k σ=60%", "10k")                 # a wide σ reaches R ≤ 0 in about 5 % of first draws
    res = mc.run(c, 2000, seed=4)
    assert (res.inputs["div.r_top"] > 0).all() and res.valid.all() and res.units == 2000
    assert np.isfinite(res.metrics["gain_db"]).all()


def test_a_unit_still_non_physical_is_rejected_and_left_out_of_the_yield(monkeypatch):
    """Without redraws, the first draws below 0 Ω reject their units: reported apart, outside
    every yield's denominator, never a design failure."""
    from chainplan.studies import tolerances
    monkeypatch.setattr(tolerances, "REDRAWS", 0)
    c = chain_from(DIVIDER.format(ra="10k σ=60%", rb="10k") + "requirements:\n  - min_gain: -40 dB\n")
    res = mc.run(c, 2000, seed=4)
    rejected = res.rejected
    assert 0 < rejected.sum() < 200 and res.units == 2000 - rejected.sum()
    assert res.yield_all == 1.0                     # every accepted unit passes


def test_metric_names_match_the_metrics():
    c = chain_from(FOLLOWER)
    from chainplan.engine.budget import evaluate
    assert list(mc.metrics(evaluate(c))) == mc.metric_names(c)


# -- the command ----------------------------------------------------------------

def test_spread_command_json_and_tables(cli, spec_file):
    path = spec_file(DIVIDER.format(ra="10k ±1%", rb="10k ±1%") + "requirements:\n  - min_gain: -6.1 dB\n")
    rc, out, _ = cli("spread", path, "-n", "2000", "--seed", "7", "--json")
    d = json.loads(out)
    assert rc == 0 and d["samples"] == 2000 and d["seed"] == 7
    assert set(d["metrics"]["gain_db"]) >= {"mean", "std", "p0_1", "p50", "p99_9", "nominal"}
    (req,) = d["requirements"]
    assert 0 < req["yield"] < 1 and d["yield_all"] == req["yield"]
    assert d["ranking"]["of"] == "min_gain"
    rc, out, _ = cli("spread", path, "-n", "2000", "--seed", "7")
    assert rc == 0 and "Yield" in out and "div.r_top" in out and "95 % interval" in out
    rc, _, _ = cli("spread", path, "-n", "2000", "--min-yield", "99.9 %")
    assert rc == 1


@pytest.mark.parametrize("field,msg", [
    ("bits: 12 ±1", "cannot carry a tolerance"),
    ("bits: 12, fs_low: 0 V ±-1%", "must not be negative"),
])
def test_spread_bad_tolerances_exit_2(cli, spec_file, field, msg):
    path = spec_file(f"""
        name: t
        source: {{kind: sensor, amplitude: 1 V}}
        stages:
          - {{name: adc, kind: adc, {field}, fs_high: 3 V{'' if 'fs_low' in field else ', fs_low: 0 V'}}}
    """)
    rc, out, err = cli("spread", path, "-n", "10")
    assert rc == 2 and out == "" and msg in err and "Traceback" not in err


def test_spread_tolerance_on_a_word_field_exits_2(cli, spec_file):
    path = spec_file(FOLLOWER.replace("bulk: source", "bulk: source ±1%"))
    rc, _, err = cli("spread", path, "-n", "10")
    assert rc == 2 and "sf.bulk" in err


def test_spread_usage_errors(cli, spec_file):
    path = spec_file(DIVIDER.format(ra="10k ±1%", rb="10k"))
    assert cli("spread", path, "-n", "0")[0] == 2
    rc, _, err = cli("spread", path, "--rank", "gain")
    assert rc == 2 and "did you mean 'gain_db'" in err


def test_temperature_reaches_the_noise_of_a_passive_chain():
    """Only temperature varies: the gain stays while the noise moves.  Resistor noise only,
    so v_rms ∝ √T (Johnson–Nyquist, v² = 4kTR·B; Nyquist, Phys. Rev. 32, 1928)."""
    if not mc.has_noise():
        pytest.skip("no noise analysis in this version")
    from chainplan.studies.tempsweep import sweep
    c = chain_from(DIVIDER.format(ra="10k", rb="10k"))
    res = sweep(c, [250.0, 350.0])
    rows = {r.key: r for r in res.rows}
    lo, hi = rows["noise_out_vrms"].values
    assert hi / lo == pytest.approx(math.sqrt(350 / 250), rel=1e-9)
    g = rows["gain_db"]
    assert g.values[0] == g.values[1] and res.drift(g) == 0.0
    assert res.drift(rows["noise_out_vrms"]) == pytest.approx((hi - lo) / 100.0)
