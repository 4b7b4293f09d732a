"""DC error sources of the stage kinds: the data-sheet fields (offset, bias
current, drift, leakage) and their temperature laws, shared by the op-amp,
follower, sensor and converter kinds.

Every error field holds a data-sheet *limit* (a magnitude, sign unknown); the
nominal budget runs with every error source at zero, so declaring them never
moves a DC level of the budget.  chainplan.engine.dcerror switches them on
one at a time through the ``_err`` parameter of a stage (a dict field ->
signed value) to carry each one to the output through the real DC solution;
a Monte Carlo run draws them.  Temperature laws (``temp_k`` is the stage's
temperature):

* an offset drifts linearly, ``vos(T) = vos + drift·(T − 25 °C)``;
* an input bias or leakage current doubles every ``doubling`` kelvin,
  ``I(T) = I·2^((T − 25 °C)/doubling)`` — junction leakage of JFET/CMOS inputs
  and of ESD diodes doubles about every 10 °C (common practice; data sheets
  of FET-input op-amps show it); ``doubling: inf`` keeps it constant.
"""
from __future__ import annotations

import numpy as np

from .base import Field

#: the temperature data-sheet limits refer to (25 °C)
T_REF_K = 298.15


def err(p: dict, name: str):
    """The signed value of error source ``name`` this analysis switched on (0 when off)."""
    return p.get("_err", {}).get(name, 0.0)


def drifted(p: dict, name: str, drift_name: str):
    """An offset at the stage temperature: ``x + drift·(T − 25 °C)`` (linear drift, data-sheet form)."""
    return err(p, name) + err(p, drift_name) * (p["temp_k"] - T_REF_K)


def doubled(p: dict, name: str, doubling):
    """A leakage current at the stage temperature: ``I·2^((T − 25 °C)/doubling)`` (common practice)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        k = np.where(np.isinf(doubling), 1.0, 2.0 ** ((p["temp_k"] - T_REF_K) / doubling))
    return err(p, name) * k


def doubling_field(what: str) -> dict:
    return {"ib_doubling" if what == "bias" else f"{what}_doubling":
            Field("dK", f"temperature rise that doubles the {what} current (inf: constant)",
                  default="10 K", positive=True, allow_inf=True, tolerable=False)}


def limit(unit: str, doc: str) -> Field:
    """A data-sheet limit of an error source: a magnitude, default zero, no ± tolerance (it is the spread)."""
    return Field(unit, doc, default="0" if unit == "1" else f"0 {unit}", minimum=0.0, tolerable=False)
