"""Passive networks as ladders of elementary sections.

Every passive stage is a list of sections — series R, series C, shunt R (to a
reference voltage), shunt C — so its ABCD matrix, DC behaviour and resistor
noise all follow from the same description and are exact (bilateral) two-ports.
Section matrices: series Z ``[[1, Z], [0, 1]]``, shunt Y ``[[1, 0], [Y, 1]]``
(Pozar, *Microwave Engineering*, table 4.1, from memory).
"""
from __future__ import annotations

from typing import NamedTuple

from .base import (ABCD, DcLoad, DcState, Field, Op, StageKind, chain, dc_load_series_r,
                   dc_load_shunt_r, dc_open, dc_series_r, dc_shunt_r, inv, series_z, shunt_y)
from .noise_sources import NoiseSource, thermal_i, thermal_v


class Section(NamedTuple):
    what: str          # 'series_r', 'series_c', 'shunt_r', 'shunt_c'
    value: object      # ohms or farads
    v_ref: object = 0.0   # shunt_r only: the voltage the resistor returns to
    name: str = ""        # the spec field it comes from, for noise reports


def section_abcd(sec: Section, s) -> ABCD:
    if sec.what == "series_r":
        return series_z(sec.value)
    if sec.what == "series_c":
        return series_z(inv(s * sec.value))
    if sec.what == "shunt_r":
        return shunt_y(inv(sec.value))
    return shunt_y(s * sec.value)


def ladder_abcd(sections, s) -> ABCD:
    m = section_abcd(sections[0], s)
    for sec in sections[1:]:
        m = chain(m, section_abcd(sec, s))
    return m


def ladder_dc_forward(sections, st: DcState) -> DcState:
    for sec in sections:
        if sec.what == "series_r":
            st = dc_series_r(st, sec.value)
        elif sec.what == "series_c":
            st = dc_open()
        elif sec.what == "shunt_r":
            st = dc_shunt_r(st, sec.value, sec.v_ref)
    return st


def ladder_dc_load(sections, load: DcLoad) -> DcLoad:
    for sec in reversed(sections):
        if sec.what == "series_r":
            load = dc_load_series_r(load, sec.value)
        elif sec.what == "series_c":
            load = DcLoad(0.0, 0.0)
        elif sec.what == "shunt_r":
            load = dc_load_shunt_r(load, sec.value, sec.v_ref)
    return load


class Passive(StageKind):
    """A passive ladder; subclasses only say which sections they are made of."""

    #: shunt elements only, in effect (a cable's series R is its conductor): in front of a
    #: virtual-ground input such a stage is part of the current path, whose transfer the
    #: budget reports instead of a loading loss (engine/budget.py: virtual_grounds)
    shunt_path: bool = False

    def sections(self, p) -> list[Section]:  # pragma: no cover - abstract
        raise NotImplementedError

    def abcd(self, p, s, op):
        return ladder_abcd(self.sections(p), s)

    def dc_input_load(self, p, out_load, op):
        return ladder_dc_load(self.sections(p), out_load)

    def dc_forward(self, p, st_in, v_in, out_load):
        return ladder_dc_forward(self.sections(p), st_in), Op()

    def noise(self, p, s, op, temp_k):
        """Thermal noise of every resistor: a series R is an EMF 4kTR where it sits,
        a shunt R a current 4kT/R at its node.  Each is carried to the stage input
        through the sections before it, M: an EMF e there is (in_v, in_i) = (M_A, M_C)·e,
        a current i is (M_B, M_D)·i (chain noise representation, Hillbrand & Russer 1976)."""
        out, m = [], ABCD(1.0, 0.0, 0.0, 1.0)
        sections = self.sections(p)
        for i, sec in enumerate(sections):
            label = f"{sec.name or sec.what} thermal"
            if sec.what == "series_r":
                out.append(NoiseSource(label, thermal_v(sec.value, temp_k), in_v=m.A, in_i=m.C))
            elif sec.what == "shunt_r":
                out.append(NoiseSource(label, thermal_i(sec.value, temp_k), in_v=m.B, in_i=m.D))
            if i + 1 < len(sections):          # the product through the last section is not needed
                m = chain(m, section_abcd(sec, s))
        return out


_R = dict(unit="ohm", positive=True)
_C = dict(unit="F", positive=True)


class SeriesR(Passive):
    kind, title = "series_r", "series resistor"
    FIELDS = {"r": Field(doc="resistance", required=True, **_R)}

    def sections(self, p):
        return [Section("series_r", p["r"], name="r")]


class ShuntR(Passive):
    kind, title = "shunt_r", "shunt resistor"
    shunt_path = True        # in front of a virtual ground: part of the current path (engine/budget.py)
    FIELDS = {"r": Field(doc="resistance", required=True, **_R),
              "ref": Field("V", "voltage the resistor returns to", default="0 V", rail_ok=True)}

    def sections(self, p):
        return [Section("shunt_r", p["r"], p["ref"], "r")]


class ShuntC(Passive):
    kind, title = "shunt_c", "shunt capacitor"
    shunt_path = True        # in front of a virtual ground: part of the current path (engine/budget.py)
    FIELDS = {"c": Field(doc="capacitance", required=True, **_C)}

    def sections(self, p):
        return [Section("shunt_c", p["c"])]


class RcLowpass(Passive):
    kind, title = "rc_lowpass", "RC low-pass (series R, shunt C); corner 1/(2πRC)"
    FIELDS = {"r": Field(doc="series resistance", required=True, **_R),
              "c": Field(doc="shunt capacitance", required=True, **_C)}

    def sections(self, p):
        return [Section("series_r", p["r"], name="r"), Section("shunt_c", p["c"])]


class RcHighpass(Passive):
    kind, title = "rc_highpass", "RC high-pass (series C, shunt R); corner 1/(2πRC)"
    FIELDS = {"c": Field(doc="series capacitance", required=True, **_C),
              "r": Field(doc="shunt resistance", required=True, **_R),
              "ref": Field("V", "voltage the shunt resistor returns to", default="0 V", rail_ok=True)}

    def sections(self, p):
        return [Section("series_c", p["c"]), Section("shunt_r", p["r"], p["ref"], "r")]


class Divider(Passive):
    kind, title = "divider", "resistive divider (top R, bottom R to a reference)"
    FIELDS = {"r_top": Field(doc="upper (series) resistance", required=True, **_R),
              "r_bottom": Field(doc="lower (shunt) resistance", required=True, **_R),
              "ref": Field("V", "voltage the bottom resistor returns to", default="0 V", rail_ok=True)}

    def sections(self, p):
        return [Section("series_r", p["r_top"], name="r_top"), Section("shunt_r", p["r_bottom"], p["ref"], "r_bottom")]


class AcCoupling(Passive):
    kind, title = "ac_coupling", "AC coupling: series C, bias resistor to a bias voltage (resets the DC level)"
    FIELDS = {"c": Field(doc="coupling capacitance", required=True, **_C),
              "r_bias": Field(doc="bias resistance", required=True, **_R),
              "bias": Field("V", "bias voltage the node is pulled to", required=True, rail_ok=True)}

    def sections(self, p):
        return [Section("series_c", p["c"]), Section("shunt_r", p["r_bias"], p["bias"], "r_bias")]


class Cable(Passive):
    kind, title = "cable", "cable as one lumped L-section (series R, shunt C·length)"
    shunt_path = True        # in front of a virtual ground: part of the current path (engine/budget.py)
    FIELDS = {"length": Field("m", "cable length", required=True, positive=True),
              "c_per_m": Field("F/m", "capacitance per metre", required=True, positive=True),
              "r_per_m": Field("ohm/m", "conductor resistance per metre (both conductors)",
                               default="0 Ω/m", minimum=0.0)}

    def sections(self, p):
        return [Section("series_r", p["r_per_m"] * p["length"], name="conductor"),
                Section("shunt_c", p["c_per_m"] * p["length"])]


KINDS = [SeriesR, ShuntR, ShuntC, RcLowpass, RcHighpass, Divider, AcCoupling, Cable]
