"""The loop: loop response and Nyquist margins (one loop and MIMO), the closed-loop
simulator, RBJ cookbook cuts and the virtual ring-out.

The names below are the public API; each is imported from its module on first use.
"""

from howl._lazy import lazy_exports

_NAMES = {
    "loop_response": "nyquist",
    "nyquist_margin": "nyquist",
    "mimo_margin": "mimo",
    "loop_matrix": "mimo",
    "band_loop_gain_db": "nyquist",
    "third_octave_loop_gain": "nyquist",
    "check_ir": "nyquist",
    "ir_warnings": "nyquist",
    "worst_crossing_outside_band": "_outside",
    "worst_mimo_crossing_outside_band": "_outside",
    "OutsideCrossing": "_outside",
    "simulate_closed_loop": "simulate",
    "simulate_mimo": "simulate",
    "stream_closed_loop": "simulate",
    "gain_schedule_db": "simulate",
    "soft_limit": "simulate",
    "Notch": "notch",
    "notch_sos": "notch",
    "rbj_notch_sos": "notch",
    "rbj_peaking_sos": "notch",
    "sos_response": "notch",
    "cascade_sos": "notch",
    "cascade_response": "notch",
    "analog_response": "notch",
    "q_from_bandwidth_oct": "notch",
    "bandwidth_oct_from_q": "notch",
    "drift_bandwidth_oct": "notch",
    "merge_notches": "notch",
    "suggest_cut": "notch",
    "ring_out": "ringout",
    "planning_ir": "ringout",
    "temperature_shifted_ir": "ringout",
    "tonal_cost_db": "ringout",
}

__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy_exports(__name__, _NAMES)
