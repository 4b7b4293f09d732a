"""Safety cautions for chains marked hazardous (spec field ``hazards``).

chainplan computes signal budgets; it defers everything about electrical
safety to the applicable standards, local codes and licensed practice."""
from __future__ import annotations

SAFETY = {
    "mains": "mains-powered equipment",
    "high_voltage": "high voltages",
    "patient": "a patient connection",
}


def safety_notice(hazards) -> str | None:
    """The usual caution for hazardous chains; chainplan computes signal budgets,
    not safety."""
    if not hazards:
        return None
    what = ", ".join(SAFETY.get(h, h) for h in hazards)
    return (f"CAUTION: this chain involves {what}. chainplan computes signal budgets only; it does not "
            "assess insulation, creepage, leakage currents or isolation. Follow the applicable safety "
            "standards and local codes, and have the design reviewed by a qualified, licensed professional.")
