"""Sound-card input devices through PortAudio (via :mod:`sounddevice`, imported on first use).

A missing PortAudio library, an unknown device, or a device that refuses the requested rate
or channel count becomes one :class:`~benchfit.errors.DeviceError` line (exit code 3).
"""

from __future__ import annotations

import contextlib
import math
import os
import tempfile
from dataclasses import dataclass
from typing import Any

from benchfit.errors import CaptureError, DeviceError

__all__ = ["InputDevice", "list_input_devices", "resolve_input_device", "check_input",
           "quiet_native_stderr", "sounddevice_module"]

# --------------------------------------------------------------------------------------
# PortAudio access
# --------------------------------------------------------------------------------------
@contextlib.contextmanager
def quiet_native_stderr():
    """Send what C libraries (ALSA, PortAudio) print to file descriptor 2 to a scratch file.

    Their diagnostics ("Expression … failed", "Unknown PCM …") are not errors of ours; the
    PortAudio error code that follows is turned into one DeviceError line instead.
    """
    try:
        fd = os.dup(2)
    except OSError:  # no stderr at all
        yield
        return
    with tempfile.TemporaryFile() as scratch:
        try:
            os.dup2(scratch.fileno(), 2)
            yield
        finally:
            os.dup2(fd, 2)
            os.close(fd)


def sounddevice_module():
    """Import sounddevice, turning a missing PortAudio library into a DeviceError."""
    try:
        with quiet_native_stderr():
            import sounddevice as sd
    except OSError as e:
        raise DeviceError(
            f"PortAudio: the audio library is not available ({e}) — install PortAudio "
            "(Debian/Ubuntu: apt install libportaudio2) to record from a sound card") from e
    return sd


@dataclass(frozen=True)
class InputDevice:
    """An audio input device as PortAudio reports it.

    Attributes
    ----------
    index : int
        PortAudio device index.
    name : str
        Device name.
    hostapi : str
        Host API name (ALSA, PulseAudio, …).
    input_channels : int
        Maximum number of input channels.
    default_rate_hz : float
        Default sample rate (Hz).
    is_default : bool
        True for the default input device.
    """

    index: int
    name: str
    hostapi: str
    input_channels: int
    default_rate_hz: float
    is_default: bool

    def to_dict(self) -> dict[str, Any]:
        return {"index": self.index, "name": self.name, "hostapi": self.hostapi,
                "input_channels": self.input_channels, "default_rate_hz": self.default_rate_hz,
                "is_default": self.is_default}


def list_input_devices() -> list[InputDevice]:
    """Every device with at least one input channel, in PortAudio's order."""
    sd = sounddevice_module()
    try:
        with quiet_native_stderr():
            devices = sd.query_devices()
            apis = sd.query_hostapis()
            default_in = sd.default.device[0]
    except sd.PortAudioError as e:
        raise DeviceError(f"PortAudio: cannot list devices ({e}) — check the sound system is running") from e
    if default_in is None or default_in < 0:
        default_in = next((a["default_input_device"] for a in apis if a["default_input_device"] >= 0), -1)
    out = []
    for i, d in enumerate(devices):
        if d["max_input_channels"] > 0:
            out.append(InputDevice(index=i, name=d["name"], hostapi=apis[d["hostapi"]]["name"],
                                   input_channels=int(d["max_input_channels"]),
                                   default_rate_hz=float(d["default_samplerate"]),
                                   is_default=(i == default_in)))
    return out


def resolve_input_device(device: str | int | None) -> InputDevice:
    """Find an input device by index, by (part of) its name, or the default one.

    Raises
    ------
    DeviceError
        No input devices, no match, or an ambiguous name; the message lists the choices.
    """
    devices = list_input_devices()
    if not devices:
        raise DeviceError("device: no audio input devices found — connect a sound card "
                          "or start the sound server, then run 'benchfit devices'")
    names = "; ".join(f"{d.index}: {d.name}" for d in devices)
    if device is None or (isinstance(device, str) and not device.strip()):
        for d in devices:
            if d.is_default:
                return d
        return devices[0]
    if isinstance(device, int) or (isinstance(device, str) and device.strip().isdigit()):
        idx = int(device)
        for d in devices:
            if d.index == idx:
                return d
        raise DeviceError(f"device={device!r}: no input device with that index — choose one of {names}")
    key = device.strip().lower()
    exact = [d for d in devices if d.name.lower() == key]
    if len(exact) == 1:
        return exact[0]
    partial = [d for d in devices if key in d.name.lower()]
    if len(partial) == 1:
        return partial[0]
    if not partial:
        raise DeviceError(f"device={device!r}: no input device of that name — choose one of {names}")
    raise DeviceError(f"device={device!r}: matches several devices ({'; '.join(d.name for d in partial)}) "
                      "— give the index instead")


def check_input(device: str | int | None, rate: float, channels: int) -> InputDevice:
    """Resolve the device and ask PortAudio whether it accepts the rate and channel count.

    Raises
    ------
    DeviceError
        The device is missing or refuses the settings (exit code 3).
    """
    if not (isinstance(channels, int) and channels >= 1):
        raise CaptureError(f"channels: must be a whole number ≥ 1, got {channels!r}")
    if not (math.isfinite(rate) and rate > 0):
        raise CaptureError(f"rate: must be a positive number of Hz, got {rate!r}")
    dev = resolve_input_device(device)
    if channels > dev.input_channels:
        raise DeviceError(f"channels={channels}: device {dev.name!r} has only {dev.input_channels} "
                          "input channel(s) — ask for fewer")
    sd = sounddevice_module()
    try:
        with quiet_native_stderr():
            sd.check_input_settings(device=dev.index, channels=channels, samplerate=rate, dtype="float32")
    except sd.PortAudioError as e:
        raise DeviceError(f"device={dev.name!r}: refuses {channels} channel(s) at {rate:g} Hz ({e}) — "
                          f"try its default rate {dev.default_rate_hz:g} Hz or fewer channels") from e
    return dev


