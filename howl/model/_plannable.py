"""What a rig needs before it can be planned, checked where the rig is checked (private).

The loader checks each key on its own; a few problems show only when the parts meet (no open
mic reaches a loudspeaker, a listener standing on a loudspeaker, a talker on a capsule).
:func:`check_plannable` finds them the way the planner would, and names the rig file, so
``howl check`` refuses what ``howl plan`` would refuse.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from howl.errors import InputError

#: closer than this counts as "at the same point" (the planner divides by these distances)
SAME_POINT_M = 1e-3


def check_plannable(rig) -> None:
    """Raise :class:`InputError` (naming the rig file) for a rig the planner cannot plan."""
    from howl.model.directivity import _mic_table, _speaker_table
    from howl.model.plan import _talker_for, mix_matrix

    file = rig.source_file
    for s in rig.speakers:  # tables named by the rig are read when planning: read them now (errors name the owner)
        if s.directivity_file:
            _speaker_table(s)
    for m in rig.mics:
        if m.pattern_file:
            _mic_table(m)
    try:
        e = mix_matrix(rig)
    except InputError as exc:
        raise InputError(exc.message, file=file, key=exc.key) from None
    routed = np.any(e > 0, axis=0)
    if not np.any(routed):
        raise InputError("no open mic reaches any loudspeaker through the mixes; nothing to plan (open a mic and "
                         "give it a gain in a mix that feeds a loudspeaker)", file=file, key="mixes")
    listeners = list(rig.listeners)
    for k in np.flatnonzero(routed):
        mic = rig.mics[k]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            tname, tpos, _ = _talker_for(rig, mic)
        if math.dist(tpos, mic.position_m) < SAME_POINT_M:
            raise InputError(f"talker {tname!r} is at mic {mic.name!r}'s capsule (0 m); expected a distance > 0",
                             file=file, key=f"talkers.{tname}.position_m")
        if not listeners:
            continue
        far = max(listeners, key=lambda x: math.dist(x.position_m, tpos))
        if math.dist(far.position_m, tpos) < SAME_POINT_M:
            raise InputError(f"listener {far.name!r} is at talker {tname!r}'s position (0 m)", file=file,
                             key=f"listeners.{far.name}.position_m")
        for j in np.flatnonzero(e[:, k] > 0):
            spk = rig.speakers[j]
            if math.dist(spk.position_m, far.position_m) < SAME_POINT_M:
                raise InputError(f"listener {far.name!r} is at loudspeaker {spk.name!r} (0 m)", file=file,
                                 key=f"listeners.{far.name}.position_m")
