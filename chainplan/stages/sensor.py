"""The signal source: a sensor as a Thevenin source with a source impedance R ‖ C
(a piezo element, an electrode with a long lead), or as a Norton source — a
current in parallel with R ‖ C (a photodiode: photocurrent, shunt resistance,
junction capacitance).  Thevenin's and Norton's theorems; the source noise is
the Nyquist noise 4kT·Re(Zs) of its impedance (Nyquist, Phys. Rev. 32, 1928).

A source hands the cascade engine its row ``(A_s, B_s)`` with ``X = A_s·V + B_s·I``
(``I`` drawn from its node): ``X`` is the signal the chain's transfers refer to.
A voltage sensor has ``X = Vs`` and the row ``(1, Zs)``; a current sensor has
``X = Is`` and the row ``(Ys, 1)`` (Norton: ``Is = Ys·V + I``), so every transfer
V_node/X is then a transimpedance in Ω — exact even for an ideal current
source (Ys = 0), with no EMF I·Zs that would be infinite at DC."""
from __future__ import annotations

import numpy as np

from .base import DcState, Field, Op, StageKind, inv
from .dc_sources import drifted, err, limit

#: power drawn by a sensor (a bridge's excitation, an electrode's bias): see engine/power.py
EXCITATION = {
    "i_excitation": Field("A", "quiescent current the sensor draws from its excitation rail", default="0 A",
                          minimum=0.0, tolerable=False),
    "excitation": Field("V", "rail that feeds the sensor's excitation current", rail_ok=True),
}
SENSITIVITY = {
    "sensitivity": Field("sensitivity", "signal per unit of the measurand, which names the unit every input-referred "
                         "figure is also shown in: '12 mV/Pa', '-190 dB re 1 V/µPa', '2 mV/V at 50 kg' (times "
                         "the excitation), '10 pC/g' (over c), '0.5 A/W', '59.16 mV/pH 3354ppm/K' "
                         "(docs/models.md, 'Sensitivity and sensor units')", tolerable=False),
    "sensitivity_error": limit("%", "sensitivity (span) tolerance of the sensor, a limit at 25 °C"),
}
from .noise_sources import NoiseSource, shot, thermal_i, thermal_v


class Sensor(StageKind):
    kind, title, role = "sensor", "sensor (Thevenin source, R ‖ C)", "source"
    signal_unit = "V"        # unit of the source signal X every transfer refers to
    FIELDS = {
        "amplitude": Field("V", "signal amplitude of the open-circuit EMF, a peak (or rms or peak-to-peak: '14 mV rms', '40 mVpp')", required=True, positive=True),
        "dc": Field("V", "DC level of the open-circuit EMF", default="0 V", rail_ok=True),
        "r": Field("ohm", "source resistance", default="0 Ω", minimum=0.0, allow_inf=True),
        "c": Field("F", "capacitance across the source (sensor or lead capacitance)", default="0 F", minimum=0.0),
        "offset": limit("V", "offset of the EMF at the zero point, a limit at 25 °C (the error budget carries ±offset)"),
        "offset_drift": limit("V/K", "drift of the sensor's offset"),
        **SENSITIVITY,
        **EXCITATION,
    }

    def z_source(self, p, s):
        """Source impedance R ‖ 1/(sC)."""
        return inv(inv(p["r"]) + s * p["c"])

    def source_row(self, p, s):
        """Row ``(1, Zs)``: ``Vs = V + Zs·I`` (Thevenin)."""
        zs = self.z_source(p, s)
        return np.ones_like(s) + 0.0 * zs, zs + 0.0 * s

    def dc_state(self, p) -> DcState:
        """EMF dc (+ the measurand's displacement ``_dx`` an error analysis applies, scaled by
        the sensitivity error, + the offset when switched on) behind r."""
        return DcState(self.emf(p), 1.0, p["r"]) if not _is_inf(p["r"]) else DcState(0.0, 0.0, 1.0)

    @staticmethod
    def emf(p):
        if "_err" not in p and "_dx" not in p:
            return p["dc"]
        return p["dc"] + p.get("_dx", 0.0) * (1.0 + err(p, "sensitivity_error")) + drifted(p, "offset", "offset_drift")

    def dc_forward(self, p, st_in, v_in, out_load):
        return self.dc_state(p), Op()

    def noise(self, p, s, op, temp_k):
        """Nyquist noise of the source impedance: an EMF of PSD 4kT·Re(Zs) in series
        with the source (Nyquist, Phys. Rev. 32, 1928); none for an open source."""
        re_z = np.real(self.z_source(p, s))
        return [NoiseSource("r thermal", thermal_v(np.where(np.isfinite(re_z), re_z, 0.0), temp_k), out_v=1.0)]


def _is_inf(x):
    return bool(np.all(np.isinf(x)))


class CurrentSensor(StageKind):
    kind, title, role = "current_sensor", "current-output sensor (Norton source, I ‖ R ‖ C)", "source"
    signal_unit = "A"
    FIELDS = {
        "amplitude": Field("A", "signal current amplitude, a peak (or rms or peak-to-peak: '2 µA rms'), e.g. a photocurrent", required=True, positive=True),
        "dc": Field("A", "DC current (photocurrent plus dark current); it flows out of the sensor into its node "
                    "and sets the shot noise 2q·|I|", default="0 A"),
        "r": Field("ohm", "shunt resistance across the current source", default="inf", positive=True,
                   allow_inf=True),
        "c": Field("F", "capacitance across the current source (junction plus lead)", default="0 F", minimum=0.0),
        **SENSITIVITY,
        **EXCITATION,
    }

    def y_source(self, p, s):
        """Source admittance 1/R + sC."""
        return inv(p["r"]) + s * p["c"]

    def z_source(self, p, s):
        """Source impedance R ‖ 1/(sC)."""
        return inv(self.y_source(p, s))

    def source_row(self, p, s):
        """Row ``(Ys, 1)``: ``Is = Ys·V + I`` (Norton)."""
        ys = self.y_source(p, s) + 0.0 * s
        return ys, np.ones_like(ys)

    def dc_state(self, p) -> DcState:
        """Norton relation in conductance form ``I = V/R + I_out``: e = I, a = 1/R, b = 1
        (the current moved by ``_dx``, scaled by the sensitivity error, in an error analysis)."""
        i = p["dc"] + p.get("_dx", 0.0) * (1.0 + err(p, "sensitivity_error"))
        return DcState(i, inv(p["r"]), 1.0)

    def dc_forward(self, p, st_in, v_in, out_load):
        return self.dc_state(p), Op()

    def noise(self, p, s, op, temp_k):
        """Noise currents into the sensor node: the shunt R's thermal current 4kT/R
        (Norton form of Nyquist's 4kTR) and the shot noise 2q·|I_dc| of the diode
        current (Schottky; Graeme, *Photodiode Amplifiers*, noise chapter, from memory)."""
        return [NoiseSource("r thermal", thermal_i(p["r"], temp_k), out_i=1.0),
                NoiseSource("shot", shot(p["dc"]), out_i=1.0)]


KINDS = [Sensor, CurrentSensor]
