"""Acoustic path → loop IR: the stated gains and sensitivities of the loop (private; see
:mod:`howl.measure.session`, which re-exports these names)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from howl import validate as v
from howl.units import P_REF_PA, db, from_db

# ------------------------------------------------------ acoustic path → loop IR

#: 20·log10(1 Pa / 20 µPa) = 93.98 dB: converts dB SPL to dB re 1 Pa (ISO 1683 reference).
DB_SPL_OF_1_PA = float(20.0 * math.log10(1.0 / P_REF_PA))


@dataclass(frozen=True)
class GainChain:
    """Electrical gains and sensitivities of the loop at the show's reference settings.

    mic_sensitivity_dbv_pa : show mic output, dBV for 1 Pa.
    preamp_gain_db : mic preamp gain (voltage dB).
    console_gain_db : everything from preamp output to the console's mix output
        (channel, fader, bus, processing), voltage dB.
    amp_gain_db : from the mix output to the point the speaker sensitivity refers to
        (0 dB if the sensitivity is quoted at the amplifier's input for this drive).
    speaker_sensitivity_db_spl_1v_1m : on-axis SPL at 1 m for 1 V rms.
    """

    mic_sensitivity_dbv_pa: float
    preamp_gain_db: float
    console_gain_db: float
    amp_gain_db: float
    speaker_sensitivity_db_spl_1v_1m: float

    def terms_db(self) -> list[tuple[str, float]]:
        return [
            ("speaker: Pa at 1 m per volt = sensitivity − 93.98", self.speaker_sensitivity_db_spl_1v_1m - DB_SPL_OF_1_PA),
            ("mic: volts per Pa", self.mic_sensitivity_dbv_pa),
            ("preamp gain", self.preamp_gain_db),
            ("console gain to the mix output", self.console_gain_db),
            ("amplifier gain", self.amp_gain_db),
        ]


@dataclass(frozen=True)
class InterfaceCalibration:
    """How a digital measurement (full scale out → full scale in) maps to volts and pascals.

    interface_out_dbv_fs : output voltage (dBV rms) of a full-scale sine.
    interface_in_dbv_fs : input voltage (dBV rms) that reads as a full-scale sine, at the input gain used.
    measurement_mic_dbv_pa : the measurement mic's sensitivity, dBV for 1 Pa.
    drive_gain_db : gain from the interface output to the point the speaker sensitivity refers to.
    """

    interface_out_dbv_fs: float
    interface_in_dbv_fs: float
    measurement_mic_dbv_pa: float
    drive_gain_db: float = 0.0


@dataclass(frozen=True, eq=False)
class LoopCombination:
    loop_ir: np.ndarray
    acoustic_ir: np.ndarray
    acoustic_scale_db: float | None  # digital → acoustic (None when the input was already acoustic)
    loop_scale_db: float
    total_scale_db: float
    lines: tuple[str, ...]
    terms: tuple[tuple[str, float], ...]


def combine_acoustic_to_loop(ir: np.ndarray, chain: GainChain,
                             interface: InterfaceCalibration | None = None) -> LoopCombination:
    """Turn an acoustic path into the loop IR with stated gains and sensitivities.

    The acoustic path ``a(t)`` is the pressure at the mic per pressure the speaker makes
    on axis at 1 m (Pa/Pa, dimensionless). The loop (positive-feedback convention,
    mix output → amp → speaker → room → mic → preamp → console → mix output) is

        L(t) = a(t) · 10^((S_spk − 93.98)/20) · g_amp · 10^(S_mic/20) · g_pre · g_console

    i.e. in dB: L = A + (S_spk − 93.98) + G_amp + S_mic + G_pre + G_console, where 93.98 dB
    is the SPL of 1 Pa re 20 µPa (ISO 1683). This is the product the rig model uses
    (mic sensitivity × mix gain × speaker sensitivity × acoustic path).

    With ``interface`` the IR is a digital measurement with a measurement mic (full scale
    in per full scale out) and is first converted to the acoustic path:

        A = H_dig + V_in,FS − S_meas − V_out,FS − G_drive − (S_spk − 93.98)   (all dB)

    (volts at the speaker's reference point per full-scale out: V_out,FS + G_drive; pascals
    at the mic per full-scale in: V_in,FS − S_meas.)
    """
    h = v.finite_array(ir, "ir", ndim=1)
    lines: list[str] = []
    terms = chain.terms_db()
    spk_db = terms[0][1]
    acoustic_scale = None
    if interface is not None:
        acoustic_scale = (interface.interface_in_dbv_fs - interface.measurement_mic_dbv_pa
                          - interface.interface_out_dbv_fs - interface.drive_gain_db - spk_db)
        lines += [
            "acoustic path from the digital measurement (dB):",
            f"  + input full scale      {interface.interface_in_dbv_fs:+8.2f} dBV",
            f"  − measurement mic       {interface.measurement_mic_dbv_pa:+8.2f} dBV/Pa",
            f"  − output full scale     {interface.interface_out_dbv_fs:+8.2f} dBV",
            f"  − drive gain            {interface.drive_gain_db:+8.2f} dB",
            f"  − speaker Pa@1m per V   {spk_db:+8.2f} dB  ({chain.speaker_sensitivity_db_spl_1v_1m:g} dB SPL − 93.98)",
            f"  = digital → acoustic    {acoustic_scale:+8.2f} dB",
        ]
        a = h * from_db(acoustic_scale)
    else:
        a = h.copy()
    loop_scale = float(sum(t[1] for t in terms))
    lines.append("loop from the acoustic path (dB):")
    for name, val in terms:
        lines.append(f"  + {name:<48} {val:+8.2f}")
    lines.append(f"  = acoustic → loop {'':<32}{loop_scale:+8.2f} dB")
    total = loop_scale + (acoustic_scale or 0.0)
    peak_db = db(np.max(np.abs(a)) * from_db(loop_scale))
    lines.append(f"loop IR peak: {peak_db:+.2f} dB (total scale {total:+.2f} dB)")
    return LoopCombination(a * from_db(loop_scale), a, acoustic_scale, loop_scale, total, tuple(lines),
                           tuple(terms))
