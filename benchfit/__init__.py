"""benchfit: capture, measure and fit low-frequency signal sources and L-C filters.

Two tiers, as in most measurement libraries:

* one-call conveniences: ``benchfit.load(path)``, ``benchfit.measure(capture_or_path)``,
  ``benchfit.fit_lowpass(capture, ...)``, ``benchfit.fit_ringdown(capture, ...)``,
  ``benchfit.record(path, seconds=...)``;
* the objects underneath: :class:`Capture`, :class:`Measurement`, :class:`FitResult`.

Names are imported on first use (PEP 562), so ``import benchfit`` is cheap and works on a
machine without PortAudio; sounddevice and matplotlib load only when recording or plotting.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

_EXPORTS: dict[str, str] = {
    "load": "benchfit.capture.load",
    "Capture": "benchfit.capture.capture",
    "InputCalibration": "benchfit.capture.capture",
    "measure": "benchfit.measurement.summary",
    "Measurement": "benchfit.measurement.result",
    "ChannelMeasurement": "benchfit.measurement.result",
    "Harmonic": "benchfit.measurement.result",
    "fit_lowpass": "benchfit.fit.lowpass",
    "fit_ringdown": "benchfit.fit.ringdown",
    "FitResult": "benchfit.fit.result",
    "record": "benchfit.capture.live",
    "BenchfitError": "benchfit.errors",
    "CaptureError": "benchfit.errors",
    "DeviceError": "benchfit.errors",
    "MeasureError": "benchfit.errors",
    "FitError": "benchfit.errors",
    "SpecError": "benchfit.errors",
    "DesignError": "benchfit.errors",
    "LogError": "benchfit.errors",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'benchfit' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
