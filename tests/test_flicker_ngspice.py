"""MOSFET flicker noise in SPICE's KF/AF form against ngspice's ``.noise``
(Debian package ``ngspice``, level-1 MOSFET, whose 1/f drain-current noise is
KF·Id^AF/(f·Cox²·W·L) with Cox = 3.9·ε0/TOX: mos1noi.c).

The netlists are written by hand from the chains they mirror, with the device's
own KF, AF and TOX on the card (TOX also gives ngspice's device Meyer
capacitances, a fraction of a pF here, which do not matter at these
frequencies), so neither chainplan's noise model nor its SPICE export checks
itself.  Checks: output noise density at a few frequencies within 1 % (the
Boltzmann constant differs by 1.7e-7 relative: ../shared/README.md); and the
corner shorthand, which is a KF fixed at the nominal bias, at another bias.
"""
from __future__ import annotations

import numpy as np
import pytest

from chainplan.engine.budget import evaluate, nominal_params
from chainplan.engine.noise import density_at
from chainplan.errors import SpecError
from chainplan.render.spice import export
from chainplan.stages.noise_sources import oxide_capacitance
from conftest import chain_from
from helpers_ngspice import needs_ngspice, run_noise

REL = 0.01
SPOT_HZ = [1.0, 10.0, 100.0, 1e3, 1e4]
ANALYSIS = "analysis: {f_ref: 1 kHz, f_start: 1 Hz, f_stop: 1 MHz, points: 301}\n"

CS_CHAIN = """
name: cs-flicker
temperature: 27 °C
t_nom: 27 °C
rails: {vdd: 5 V}
source: {name: src, kind: sensor, amplitude: 1 mV, dc: 1.0 V, r: 1k}
stages:
  - {name: cs, kind: common_source, kp: 100 µA/V², w: 100 µm, l: 2 µm, vth0: 0.6 V, lambda: 0.02 /V,
     r_d: 10k, kf: 3e-31, af: 1, tox: 20 nm}
  - {name: rl, kind: load, r_in: 1meg}
""" + ANALYSIS
CS_NET = """
Vsrc e 0 dc 1.0 ac 1
Rsrc e g 1k
VDD vdd 0 dc 5
M1 d g 0 0 nm w=100u l=2u
Rd vdd d 10k
RL d 0 1meg
.model nm nmos level=1 kp=100u vto=0.6 lambda=0.02 kf=3e-31 af=1 tox=20n
"""

SF_CHAIN = """
name: sf-flicker
temperature: 27 °C
t_nom: 27 °C
rails: {vdd: 3.3 V}
source: {name: src, kind: sensor, amplitude: 1 mV, dc: 2.0 V, r: 10k}
stages:
  - {name: sf, kind: source_follower, kp: 100 µA/V², w: 200 µm, l: 4 µm, vth0: 0.5 V, lambda: 0.04 /V,
     gamma: 0.4 √V, phi: 0.7 V, i_bias: 50 µA, kf: 1.3e-29, af: 1.3, tox: 15 nm}
  - {name: rl, kind: load, r_in: 100k}
""" + ANALYSIS
SF_NET = """
Vsrc e 0 dc 2.0 ac 1
Rsrc e g 10k
VDD vdd 0 dc 3.3
M1 vdd g s 0 nm w=200u l=4u
Ib s 0 dc 50u
RL s 0 100k
.model nm nmos level=1 kp=100u vto=0.5 lambda=0.04 gamma=0.4 phi=0.7 kf=1.3e-29 af=1.3 tox=15n
"""


@needs_ngspice
@pytest.mark.parametrize("chain_text, netlist, node", [(CS_CHAIN, CS_NET, "d"), (SF_CHAIN, SF_NET, "s")],
                         ids=["common_source", "source_follower"])
def test_kf_af_output_noise_density_agrees_with_ngspice(chain_text, netlist, node):
    chain = chain_from(chain_text)
    ev = evaluate(chain)
    ours, _, gens = density_at(ev, SPOT_HZ)
    ref, _ = run_noise(netlist, node, "Vsrc", SPOT_HZ)
    np.testing.assert_allclose(ours[0], ref, rtol=REL)
    # the test means something: the 1/f part dominates at 1 Hz and is negligible at 10 kHz
    channel = dict(gens)[f"{chain.stages[0].name}: channel"][0]
    assert channel[0] / channel[-1] > 50


def test_kf_form_is_the_formula():
    """S_id = KF·Id^AF/(f·Cox²·W·L) + 4kT·(2/3)·gm, Cox = 3.9·ε0/tox (ngspice mos1noi.c form)."""
    from chainplan.stages.base import K_BOLTZMANN
    from chainplan.stages.noise_sources import mosfet_channel_psd
    p = {"kf": 1e-30, "af": 1.5, "tox": 10e-9, "w": 50e-6, "l": 1e-6}
    v = {"id_a": 2e-4, "gm_s": 1e-3}
    s = 2j * np.pi * np.array([[10.0]])
    cox = 3.9 * 8.8541878128e-12 / 10e-9
    expect = 1e-30 * 2e-4 ** 1.5 / (10.0 * cox ** 2 * 50e-6 * 1e-6) + 4 * K_BOLTZMANN * 300 * 2 / 3 * 1e-3
    assert mosfet_channel_psd(p, s, v, 300.0)[0, 0] == pytest.approx(expect, rel=1e-12)
    assert float(oxide_capacitance(10e-9)) == pytest.approx(3.4531e-3, rel=1e-4)   # 3.45 fF/µm² at 10 nm


# -- the corner shorthand: a KF fixed at the nominal bias ---------------------------------------

CORNER_CHAIN = SF_CHAIN.replace("kf: 1.3e-29, af: 1.3, tox: 15 nm", "flicker_corner: 2 kHz")


def _kf_at_nominal(chain):
    """The KF that gives the corner at the nominal bias: 4kTγ·gm0·fc = KF·Id0^AF/(Cox²·W·L), ngspice's Cox
    from the default TOX (1e-7 m) so the reference card carries no TOX (no Meyer capacitances)."""
    from chainplan.stages.base import K_BOLTZMANN
    ev = evaluate(chain)
    v = ev.dc.ops["sf"].values
    gm0, id0 = float(np.ravel(v["gm_s"])[0]), float(np.ravel(v["id_a"])[0])
    cox = float(oxide_capacitance(1e-7))
    return 4 * K_BOLTZMANN * chain.temp_k * (2 / 3) * gm0 * 2e3 * cox ** 2 * 200e-6 * 4e-6 / id0


@needs_ngspice
def test_corner_shorthand_scales_with_the_bias_as_a_fixed_kf():
    """A Monte Carlo sample at four times the bias current: the corner is stated at the
    nominal bias, so the sample's 1/f noise is that of the same device (the same KF,
    AF = 1) at the sample's current — ngspice's, not a corner held at 2 kHz."""
    chain = chain_from(CORNER_CHAIN)
    kf = _kf_at_nominal(chain)
    params = nominal_params(chain)
    params["sf"] = {**params["sf"], "i_bias": np.array([[50e-6], [200e-6]])}
    ev = evaluate(chain, params)
    ours, _, _ = density_at(ev, SPOT_HZ)
    for k, i_bias in enumerate(("50u", "200u")):
        net = SF_NET.replace("dc 50u", f"dc {i_bias}").replace("kf=1.3e-29 af=1.3 tox=15n", f"kf={kf:.10g} af=1")
        ref, _ = run_noise(net, "s", "Vsrc", SPOT_HZ)
        np.testing.assert_allclose(ours[k], ref, rtol=REL, err_msg=f"i_bias {i_bias}")
    # and a plain nominal analysis of the same chain is its own reference: the corner is where 1/f = white
    _, _, gens = density_at(evaluate(chain), [2e3, 1e6])
    ch = dict(gens)["sf: channel"][0]
    assert ch[0] / ch[1] == pytest.approx(2.0 / (1 + 2e3 / 1e6), rel=1e-9)


@needs_ngspice
@pytest.mark.parametrize("chain_text", [SF_CHAIN, CORNER_CHAIN], ids=["kf", "corner"])
def test_the_export_carries_the_flicker_noise(chain_text):
    """The exported netlist (KF scaled for the default TOX) gives ngspice chainplan's density."""
    chain = chain_from(chain_text)
    ours, _, _ = density_at(evaluate(chain), SPOT_HZ)
    nl = export(chain)
    assert " kf=" in nl.text() and "tox" not in nl.circuit_text().split(".model")[1]
    ref, _ = run_noise(nl.circuit_text(), nl.output, nl.source, SPOT_HZ)
    np.testing.assert_allclose(ours[0], ref, rtol=REL)


# -- spec errors ---------------------------------------------------------------------------------

@pytest.mark.parametrize("old, new, words", [
    ("tox: 15 nm", "tox: 15 nm, flicker_corner: 1 kHz", "not both"),
    (", tox: 15 nm", "", "needs the oxide thickness tox"),
    ("w: 200 µm, l: 4 µm", "w_over_l: 50", "give w and l"),
], ids=["kf-and-corner", "no-tox", "no-length"])
def test_kf_needs_its_companions(old, new, words):
    with pytest.raises(SpecError) as exc:
        chain_from(SF_CHAIN.replace(old, new))
    assert "sf.kf" in str(exc.value) and words in str(exc.value), str(exc.value)


@needs_ngspice
def test_kf_form_follows_the_bias_in_a_study():
    """The kf form needs no reference: a sample at four times the bias is ngspice's device at that bias."""
    chain = chain_from(SF_CHAIN)
    params = nominal_params(chain)
    params["sf"] = {**params["sf"], "i_bias": np.array([[50e-6], [200e-6]])}
    ours, _, _ = density_at(evaluate(chain, params), SPOT_HZ)
    ref, _ = run_noise(SF_NET.replace("dc 50u", "dc 200u"), "s", "Vsrc", SPOT_HZ)
    np.testing.assert_allclose(ours[1], ref, rtol=REL)


@pytest.mark.parametrize("chain_text", [SF_CHAIN, CORNER_CHAIN], ids=["kf", "corner"])
def test_monte_carlo_noise_uses_the_same_flicker_law(chain_text):
    """The Monte Carlo's noise powers (workspace, powers only) of samples at 50 and 200 µA equal the
    integrated density of the evaluation checked against ngspice above (the corner scaled from its
    nominal bias, not held at 2 kHz)."""
    from chainplan.engine.noise import analyse_noise
    from chainplan.studies import montecarlo as mc
    from chainplan.studies.tolerances import draw
    text = chain_text.replace("i_bias: 50 µA", "i_bias: 50 µA ±80%")
    chain = chain_from(text)
    d = draw(chain, 2, seed=1)
    d.assign[("sf", "i_bias")] = np.array([50e-6, 200e-6])
    res = mc.run_draws(d)
    params = nominal_params(chain)
    params["sf"] = {**params["sf"], "i_bias": np.array([[50e-6], [200e-6]])}
    expect = analyse_noise(evaluate(chain, params)).out_vrms
    np.testing.assert_allclose(res.metrics["noise_out_vrms"], expect, rtol=1e-9)
    # a corner held at 2 kHz at every bias would give the 200 µA sample half the 1/f power at the drain
    # (4kTγ·gm·fc with gm ∝ √Id, against 4kTγ·gm0·fc·Id/Id0): the law matters where 1/f dominates
    if chain_text is CORNER_CHAIN:
        held, _, _ = density_at(evaluate(chain_from(text.replace("i_bias: 50 µA ±80%", "i_bias: 200 µA"))), [1.0])
        scaled, _, _ = density_at(evaluate(chain, params), [1.0])
        assert float(held[0, 0]) < 0.8 * float(scaled[1, 0])
