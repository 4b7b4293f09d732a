"""Class-A swing of followers under load: the output limit set by the bias current.

A source or emitter follower only *pushes* current into its output node; what
pulls the node down is its bias (a current sink or a resistor to v_low) and the
load.  When the output falls by ΔV the device current falls by ΔV·|Ybias + Yload|,
so the device cuts off, and the output stops following, at

    V_low,class-A = V_DC − I_dev/|G_bias + Y_load(f)|

(the load's AC admittance: an AC-coupled load counts with its AC resistance; a
resistor-biased follower with a resistive load cuts off at the Thevenin level of
RE ‖ RL; a capacitive load gives the slew-rate form I_dev/(ωC_L) for a sine).
Sedra & Smith, *Microelectronic Circuits*, output stages (class-A emitter
follower, "the maximum negative swing is I·RL"), from memory.  Checked against
ngspice transients in tests/test_swing_ngspice.py.

The limit is taken at the worst frequency of the signal band (largest |Y|).  It
tightens the node's low limit where it is above the DC-pass limit (the sink's
compliance, the reader's input range) and is named 'class A' as the cause."""
from __future__ import annotations

import numpy as np


def class_a_limits(chain, params, dc, ac, cols) -> None:
    """Tighten ``dc.limits`` of every follower-driven node by the class-A limit
    (in place), recording ``dc.limit_cause[node] = (low cause, high cause)``.
    ``cols``: the frequency columns of the signal band."""
    for st in chain.stages:
        class_a = getattr(st.model, "class_a", None)
        if class_a is None or st.role != "two_port":
            continue
        op = dc.ops[st.name]
        i_dev, g_low = class_a(params[st.name], op)
        y = np.abs(g_low + np.asarray(ac.node_y[st.name])[:, cols])          # (S, K)
        y_max = np.max(y, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            low = np.ravel(dc.node_v[st.name]) - np.ravel(i_dev) / y_max
        lo, hi = dc.limits[st.name]
        lo = np.ravel(lo) + 0.0 * low
        tighter = low > lo
        if np.any(tighter):
            dc.limits[st.name] = (np.where(tighter, low, lo), hi)
            if np.all(tighter):
                dc.limit_by[st.name] = (st.name, dc.limit_by[st.name][1])
                dc.limit_cause[st.name] = ("class A", dc.limit_cause.get(st.name, (None, None))[1])
