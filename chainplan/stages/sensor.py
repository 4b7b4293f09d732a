"""The signal source: a sensor as a Thevenin source with a source impedance R ‖ C
(a piezo element, a photodiode's shunt resistance and capacitance, an electrode
with a long lead).  Thevenin's theorem; the source noise is the Nyquist noise
4kT·Re(Zs) of its impedance (Nyquist, Phys. Rev. 32, 1928)."""
from __future__ import annotations

import numpy as np

from .base import DcState, Field, Op, StageKind, inv
from .noise_sources import NoiseSource, thermal_v


class Sensor(StageKind):
    kind, title, role = "sensor", "sensor (Thevenin source, R ‖ C)", "source"
    FIELDS = {
        "amplitude": Field("V", "signal amplitude (peak) of the open-circuit EMF", required=True, minimum=0.0),
        "dc": Field("V", "DC level of the open-circuit EMF", default="0 V", rail_ok=True),
        "r": Field("ohm", "source resistance", default="0 Ω", minimum=0.0, allow_inf=True),
        "c": Field("F", "capacitance across the source (sensor or lead capacitance)", default="0 F", minimum=0.0),
    }

    def z_source(self, p, s):
        """Source impedance R ‖ 1/(sC)."""
        return inv(inv(p["r"]) + s * p["c"])

    def dc_state(self, p) -> DcState:
        return DcState(p["dc"], 1.0, p["r"]) if not _is_inf(p["r"]) else DcState(0.0, 0.0, 1.0)

    def dc_forward(self, p, st_in, v_in, out_load):
        return self.dc_state(p), Op()

    def noise(self, p, s, op, temp_k):
        """Nyquist noise of the source impedance: an EMF of PSD 4kT·Re(Zs) in series
        with the source (Nyquist, Phys. Rev. 32, 1928); none for an open source."""
        re_z = np.real(self.z_source(p, s))
        return [NoiseSource("r thermal", thermal_v(np.where(np.isfinite(re_z), re_z, 0.0), temp_k), out_v=1.0)]


def _is_inf(x):
    return bool(np.all(np.isinf(x)))


KINDS = [Sensor]
