"""waveforms.npz: sampled amplitude and phase of every shaped pulse.

Each shaped (non-square) pulse is sampled at its drive's sample rate over its
played (tick-quantized) duration. Arrays are named ``event<index>_t_ns``,
``event<index>_rabi_hz`` and ``event<index>_phase_rad``. Each deflector ramp of
a move is sampled at its port's sample rate on the tick grid
(``compile.motion.ramp_samples``): ``ramp<index>_<port>_t_ns`` from the ramp's
issue tick and ``ramp<index>_<port>_hz``. The zip is written
with fixed timestamps so identical inputs give identical bytes.
"""
from __future__ import annotations

import io
import zipfile

import numpy as np

from ..compile import envelopes
from ..lang.diagnostics import SeqlangError, error
from ..compile.pipeline import Checked
from ..compile.timeline import PULSE, Event

_FIXED_TIME = (1980, 1, 1, 0, 0, 0)


def sample(event: Event, sample_rate_hz: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sample times (s from pulse start), Rabi frequency (Hz) and phase (rad)."""
    count = envelopes.sample_count(event.duration_s, sample_rate_hz)
    t = np.linspace(0.0, event.duration_s, count)
    rabi = event.rabi_hz * envelopes.envelope(event.shape, event.duration_s, t)
    return t, rabi, np.full(count, event.phase_rad)


def waveform_arrays(checked: Checked) -> dict[str, np.ndarray]:
    arrays: dict[str, np.ndarray] = {}
    for event in checked.quantized.events:
        if event.kind != PULSE or event.shape.kind == "square":
            continue
        drive = checked.program.rig.drives[event.drive]
        t, rabi, phase = sample(event, drive.sample_rate_hz)
        if not (np.isfinite(rabi).all() and np.isfinite(phase).all()):
            # Last line of defence: the checks should have refused this pulse already.
            raise SeqlangError([error("refusing to write non-finite samples into waveforms.npz "
                                      "(this is a bug in seqlang's checks; please report it)", event.span)])
        arrays[f"event{event.index}_t_ns"] = t * 1e9
        arrays[f"event{event.index}_rabi_hz"] = rabi
        arrays[f"event{event.index}_phase_rad"] = phase
    arrays.update(_ramp_arrays(checked))
    return arrays


def _ramp_arrays(checked: Checked) -> dict[str, np.ndarray]:
    from ..compile.motion import ramp_samples
    ports = {p.channel: p for p in checked.program.rig.ports.values()}
    arrays = {}
    for entry in (e for e in checked.plan.rows() if e.kind == "ramp"):
        port = ports[entry.port]
        t, f = ramp_samples(entry.ramp[0], entry.ramp[1], entry.ticks * checked.plan.tick_s,
                            port.extra["sample_rate"], checked.plan.tick_s)
        arrays[f"ramp{entry.event}_{entry.port}_t_ns"] = np.array(t) * 1e9
        arrays[f"ramp{entry.event}_{entry.port}_hz"] = np.array(f)
    return arrays


def waveforms_npz(checked: Checked) -> bytes:
    """The npz archive as bytes (readable with numpy.load)."""
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_DEFLATED) as archive:
        for name, array in sorted(waveform_arrays(checked).items()):
            member = io.BytesIO()
            np.lib.format.write_array(member, np.ascontiguousarray(array), allow_pickle=False)
            info = zipfile.ZipInfo(name + ".npy", date_time=_FIXED_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            archive.writestr(info, member.getvalue())
    return buffer.getvalue()
