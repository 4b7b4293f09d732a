"""Stage kinds, one module per family; ``REGISTRY`` maps a spec's ``kind:`` to its model."""
from __future__ import annotations

from . import (amplifier, common_emitter, common_source, differential, emitter_follower, loads, opamp, passive,
               sensor, source_follower)
from .base import StageKind

REGISTRY: dict[str, StageKind] = {
    cls.kind: cls()
    for mod in (sensor, passive, amplifier, source_follower, common_source, emitter_follower, common_emitter,
                opamp, differential, loads)
    for cls in mod.KINDS
}
