"""The simulated rig's samples as the pulse analysis takes them (no frames, no
decoding: fast), for the pulse and noise tests (not part of the package)."""

from __future__ import annotations

from slipless.pulses.data import RunData, Series
from slipless.sim import rig


def run_data(sig: rig.RigSignals) -> RunData:
    """The rig's samples as the decoder would hand them over."""
    rd = RunData(sig.cfg.board, sig.cfg.run)
    rd.streams = {"cap_amp": Series(sig.t_s, sig.cap_v, "V"),
                  "coil_current": Series(sig.t_s, sig.current_a, "A")}
    if sig.cfg.gyro:
        rd.streams["gyro_z"] = Series(sig.gyro_t_s, sig.gyro_rad_s, "rad/s")
    rd.coil_t_s, rd.coil_state = sig.event_t_s, sig.event_state
    return rd
