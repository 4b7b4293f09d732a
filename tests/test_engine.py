"""The engine's own contracts: per-sample parameter arrays give the nominal
numbers (tolerance runs rely on it), fan-out nodes obey Thevenin's theorem with
the parallel of all branches as the load, and DC levels at fan-out nodes."""
from __future__ import annotations

import numpy as np
import pytest

from chainplan.engine.budget import evaluate, nominal_params
from conftest import DEMO_CHAINS, FAN_OUT_SPEC, chain_from, par
from chainplan.spec.loader import load_chain

EXTRA_CHAINS = {
    "emitter-follower": """
        name: ef
        rails: {vdd: 5 V}
        source: {name: src, kind: sensor, amplitude: 10 mV, dc: 2.5 V, r: 100k}
        stages:
          - {name: ef, kind: emitter_follower, beta: 100, va: 50 V, r_e: 2k}
          - {name: ce, kind: common_emitter, beta: 120, r_c: 2.2k, r_e: 1k}
          - {name: rl, kind: load, r_in: 10k, c_in: 1 nF}
    """,
    "common-source-inverting": """
        name: cs
        rails: {vdd: 5 V, vss: -5 V}
        source: {name: src, kind: sensor, amplitude: 1 mV, dc: 1.2 V, r: 1k, c: 1 nF}
        stages:
          - {name: cs, kind: common_source, kp: 200 µA/V², w_over_l: 20, vth0: 0.5 V, lambda: 0.05 /V,
             gamma: 0.4 √V, r_d: 10k, r_s: 1k}
          - {name: hp, kind: rc_highpass, c: 100 nF, r: 100k}
          - {name: inv, kind: opamp_inverting, gbw: 1 MHz, a0: 90 dB, r_out: 50, r_f: 20k, r_g: 10k,
             v_neg: vss}
          - {name: amp, kind: amplifier, gain: 3, f_3db: 50 kHz, r_in: 100k, r_out: 100}
    """,
}


def _chains():
    out = [pytest.param(lambda p=p: load_chain(str(p)), id=p.stem) for p in DEMO_CHAINS]
    out += [pytest.param(lambda t=t: chain_from(t), id=k) for k, t in EXTRA_CHAINS.items()]
    return out


def as_samples(params: dict, n: int) -> dict:
    """Every numeric parameter as an (n, 1) array of its nominal value."""
    return {st: {k: (np.full((n, 1), float(v)) if isinstance(v, (int, float)) and not isinstance(v, bool) else v)
                 for k, v in p.items()}
            for st, p in params.items()}


def _figures(ev, n: int) -> dict:
    """Everything a budget reads from an evaluation, each as an (n, k) array."""
    def rows(x):
        x = np.asarray(x)
        x = x.reshape(n, -1) if x.ndim and x.shape[0] == n else x.reshape(1, -1)   # else shared by all
        return np.broadcast_to(x, (n, x.shape[1]))
    out = {}
    for nd in ev.chain.nodes:
        out[f"h:{nd}"] = rows(np.broadcast_to(ev.gain(nd), (np.shape(ev.gain(nd))[0], ev.f_hz.size)))
        out[f"dc:{nd}"] = rows(np.ravel(ev.dc.node_v[nd]))
        out[f"peak:{nd}"] = rows(ev.peak(nd))
        out[f"room:{nd}"] = rows(ev.headroom(nd))
        lo, hi = ev.dc.limits[nd]
        out[f"low:{nd}"], out[f"high:{nd}"] = rows(np.ravel(lo)), rows(np.ravel(hi))
    for st in ev.chain.stages:
        out[f"loss:{st.name}"] = rows(ev.interface_loss_db(st.name))
    lo, hi = ev.band_edges()
    out["f_low"], out["f_high"] = rows(lo), rows(hi)
    return out


@pytest.mark.parametrize("make", _chains())
@pytest.mark.parametrize("samples", [1, 3])
def test_sample_arrays_match_nominal(make, samples):
    """A call with (S, 1) parameter arrays gives, in every sample, the nominal float call's numbers."""
    chain = make()
    nominal = _figures(evaluate(chain), 1)
    batch = _figures(evaluate(chain, as_samples(nominal_params(chain), samples)), samples)
    assert batch["h:" + chain.source.name].shape[0] == samples
    for key, ref in nominal.items():
        got = batch[key]
        assert got.shape == (samples, ref.shape[1]), key
        np.testing.assert_allclose(got, np.broadcast_to(ref, got.shape), rtol=1e-12, atol=1e-15, err_msg=key)


def test_samples_are_independent():
    """Sample k of a batch equals a nominal run with sample k's values (here R of an RC low-pass)."""
    text = """
        name: rc
        source: {name: src, kind: sensor, amplitude: 1 V, r: 1k}
        stages:
          - {name: rc, kind: rc_lowpass, r: %s, c: 10 nF}
          - {name: rl, kind: load, r_in: 20k}
    """
    batch_p = nominal_params(chain_from(text % "1k"))
    batch_p["rc"]["r"] = np.array([[1e3], [4.7e3], [22e3]])
    batch = evaluate(chain_from(text % "1k"), batch_p)
    for k, r in enumerate(("1k", "4.7k", "22k")):
        single = evaluate(chain_from(text % r))
        np.testing.assert_allclose(batch.gain("rc")[k], single.gain("rc")[0], rtol=1e-12)
        np.testing.assert_allclose(batch.band_edges()[1][k], single.band_edges()[1][0], rtol=1e-12)


# ---------------------------------------------------------------------------
# Fan-out

F = np.array([10.0, 1e3, 30e3, 1e6])


def test_fan_out_node_is_thevenin_into_parallel_branches():
    """V = Vth·ZL/(ZL + Zth) at the fan-out node, ZL the parallel of every branch's input
    impedance (Thevenin's theorem; branch impedances written out by hand)."""
    chain = chain_from(FAN_OUT_SPEC)
    ev = evaluate(chain, f_hz=F)
    s = 2j * np.pi * F
    zth = par(2e3, 1 / (s * 1e-9)) + 1e3                 # sensor R ‖ C, then the series resistor
    z_lp = 4.7e3 + par(1 / (s * 10e-9), 50e3, 1 / (s * 20e-12))
    z_div = 10e3 + par(10e3, 20e3)
    z_cab = 1.0 + 1 / (s * 1e-9)
    zl = par(z_lp, z_div, z_cab)
    np.testing.assert_allclose(ev.gain("feed")[0], zl / (zl + zth), rtol=1e-12)     # Vth = EMF here
    np.testing.assert_allclose(1 / ev.ac.node_y["feed"][0], zl, rtol=1e-12)
    # each branch sees the source loaded by its siblings
    a, b = ev.ac.branch_row["div"]
    np.testing.assert_allclose((b / a)[0], par(zth, z_lp, z_cab), rtol=1e-12)
    # and its loading loss is −20·log10|Zin/(Zin + Zth')| dB lost with that Thevenin impedance
    zs = par(zth, z_lp, z_cab)
    np.testing.assert_allclose(ev.interface_loss_db("div")[0], -20 * np.log10(np.abs(z_div / (z_div + zs))),
                               atol=1e-12)


def test_fan_out_behind_an_active_stage():
    """The demo fan-out: an op-amp stage (Thevenin from its closed-loop model) driving an
    RC into an ADC and a cable into a meter."""
    chain = load_chain(str(next(p for p in DEMO_CHAINS if p.stem == "vibration_fanout")))
    ev = evaluate(chain, f_hz=F)
    s = 2j * np.pi * F
    a0, gbw, ro, rf, rg = 10 ** (106 / 20), 5e6, 60.0, 9e3, 1e3
    a = 1 / (1 / a0 + s / (2 * np.pi * gbw))
    beta, g_fb = rg / (rf + rg), 1 / (rf + rg)
    # non-inverting stage: V1 = (β + (1 + Ro/(RF+RG))/A)·V2 + (Ro/A)·I2, open gate input
    vth = 1 / (beta + (1 + ro * g_fb) / a)                 # the sensor's 5 kΩ carries no current
    zth = (ro / a) * vth
    z_aa = 1e3 + par(1 / (s * 10e-9), 50e3, 1 / (s * 20e-12))
    z_cable = 20 * 0.08 + par(1 / (s * 20 * 100e-12), 10e3)
    zl = par(z_aa, z_cable)
    np.testing.assert_allclose(ev.gain("gain")[0], vth * zl / (zl + zth), rtol=1e-10)


def test_fan_out_dc_level():
    """DC at a node loaded by two resistors to different references (Millman's theorem):
    V = (Vs/Rs + 0/R1 + 3 V/R2)/(1/Rs + 1/R1 + 1/R2) = 5/3 V for three 1 kΩ."""
    chain = chain_from("""
        name: fan-dc
        source: {name: src, kind: sensor, amplitude: 1 mV, dc: 2 V, r: 1k}
        stages:
          - {name: to_gnd, kind: shunt_r, r: 1k}
          - {name: to_3v, kind: load, from: src, r_in: 1k, ref: 3 V}
    """)
    ev = evaluate(chain)
    assert float(np.ravel(ev.dc.node_v["src"])[0]) == pytest.approx(5 / 3, rel=1e-12)
    assert float(np.ravel(ev.dc.node_v["to_gnd"])[0]) == pytest.approx(5 / 3, rel=1e-12)
