"""Sidecar JSON files: what the recorder knew about an audio capture.

A sidecar has the same stem as its audio file (``unit7.wav`` → ``unit7.json``) and holds
the channel names, the sample rate the card was asked for, the device, the start time,
the overflow/clip counts and the input calibration that applies to the raw samples::

    {"benchfit_sidecar": 1,
     "channels": [{"name": "drive"}, {"name": "output"}],
     "sample_rate_hz": 48000, "device": "...", "start_utc": "2026-12-01T17:00:00Z",
     "overflow_count": 0, "clip_count": 0,
     "calibration": {"profile": "name" | null, "gain_v_per_fs": [g1, g2] | null,
                     "timebase_ppm": 0.0, "timebase_u_ppm": 0.0,
                     "coupling_tau_s": null | float,
                     "gain_u_rel": [u1, u2]},
     "benchfit_version": "0.1.0",
     "unit": "HC-03"}

A ``null`` entry in ``gain_v_per_fs`` (``[2.0, null]``) is a channel the calibration profile has
no gain for: that channel stays in FS while the others are read in V (its ``gain_u_rel`` entry is
``null`` too).

Optional keys:

* ``calibration.gain_u_rel`` — relative standard uncertainty (k = 1) of each channel's
  gain, one number ≥ 0 and below 1 per channel (0.003 = 0.3 %), from the calibration fit and the
  reference meter combined. Absent or null: not known (profiles made before benchfit
  stored it); levels in volts then carry only their noise uncertainty and measure says
  "gain uncertainty not known".
* ``calibration.distortion_floor_pct`` — THD (%) of the card's own loop (output to input,
  or a clean reference sine), from ``benchfit calibrate distortion``; measure budgets it in
  every THD. Absent or null: not measured.
* ``unit`` — serial of the unit under test (a string such as ``"HC-03"``), used by
  reports and the log.

Unknown keys are kept, so files from newer writers stay readable.

The raw audio file is never rewritten; the calibration is applied when the capture is
loaded. This module only reads, validates and writes the JSON.
"""

from __future__ import annotations

import json
import math
import os
from datetime import datetime
from pathlib import Path
from typing import Any

from benchfit.capture.fileio import write_bytes_new, write_text_atomic
from benchfit.errors import CaptureError

__all__ = ["SIDECAR_VERSION", "sidecar_path", "read_sidecar", "write_sidecar", "validate_sidecar"]

#: schema version written in the ``benchfit_sidecar`` key
SIDECAR_VERSION = 1

_CAL_DEFAULTS: dict[str, Any] = {
    "profile": None,
    "gain_v_per_fs": None,
    "timebase_ppm": 0.0,
    "timebase_u_ppm": 0.0,
    "coupling_tau_s": None,
}


def sidecar_path(audio_path: str | os.PathLike[str]) -> Path:
    """Path of the sidecar JSON that belongs to an audio file (same stem, ``.json``)."""
    return Path(audio_path).with_suffix(".json")


def _is_number(value: Any) -> bool:
    if not isinstance(value, (int, float)) or isinstance(value, bool):
        return False
    try:
        return math.isfinite(value)
    except OverflowError:  # an integer too large for a float ("1" and 400 zeros)
        return False


def _r(value: Any) -> str:
    """``repr`` of a value for a one-line message, cut to 40 characters."""
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _reject_constant(name: str) -> float:
    raise ValueError(f"{name} is not a JSON number")


def _is_count(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and value >= 0


def validate_sidecar(data: Any, where: str) -> dict[str, Any]:
    """Check a parsed sidecar against the schema and return a normalised copy.

    Parameters
    ----------
    data : object
        The parsed JSON value.
    where : str
        Name of the file (or parameter) used in error messages.

    Returns
    -------
    dict
        A copy of ``data`` in which ``calibration`` is always present with all five keys
        (missing ones take their defaults: no profile, no gain, 0 ppm, 0 ppm, no coupling
        time constant), plus ``gain_u_rel`` when the file gives it (a list of floats; a
        missing or null key stays absent and means "not known"). Unknown keys are kept,
        so newer writers stay readable.

    Raises
    ------
    CaptureError
        One line naming ``where`` and the offending key.
    """
    fix = "fix the sidecar, or delete it to read the audio without it"
    if not isinstance(data, dict):
        raise CaptureError(f"{where}: sidecar must be a JSON object, got {type(data).__name__} — {fix}")
    version = data.get("benchfit_sidecar")
    if version is None:
        raise CaptureError(f"{where}: not a benchfit sidecar (no 'benchfit_sidecar' key) — {fix}")
    if version != SIDECAR_VERSION or isinstance(version, bool):
        raise CaptureError(
            f"{where}: sidecar version {_r(version)} is not supported (this benchfit reads version "
            f"{SIDECAR_VERSION}) — update benchfit or rewrite the sidecar"
        )
    out = dict(data)

    channels = data.get("channels")
    if not isinstance(channels, list) or not channels:
        raise CaptureError(f"{where}: 'channels' must be a non-empty list of {{\"name\": ...}} objects — {fix}")
    names: list[str] = []
    for i, ch in enumerate(channels):
        if not isinstance(ch, dict) or not isinstance(ch.get("name"), str) or not ch["name"].strip():
            raise CaptureError(f"{where}: channels[{i}] needs a non-empty string 'name' — {fix}")
        names.append(ch["name"])
    if len({n.lower() for n in names}) != len(names):
        raise CaptureError(f"{where}: channel names {_r(names)} are not unique — {fix}")
    out["channels"] = [dict(ch) for ch in channels]

    fs = data.get("sample_rate_hz")
    if not isinstance(fs, (int, float)) or not _is_number(fs) or fs <= 0:
        raise CaptureError(f"{where}: 'sample_rate_hz' must be a positive number of Hz, got {_r(fs)} — {fix}")

    for key in ("device", "start_utc", "benchfit_version", "unit"):
        if key in data and data[key] is not None and not isinstance(data[key], str):
            raise CaptureError(f"{where}: {_r(key)} must be a string, got {_r(data[key])} — {fix}")
    if isinstance(data.get("start_utc"), str):
        try:
            datetime.fromisoformat(data["start_utc"].replace("Z", "+00:00"))
        except ValueError as e:
            raise CaptureError(f"{where}: 'start_utc' {_r(data['start_utc'])} is not an ISO 8601 time such as "
                               f"2026-12-01T17:00:00Z — {fix}") from e
    for key in ("overflow_count", "clip_count"):
        if key in data and not _is_count(data[key]):
            raise CaptureError(f"{where}: {_r(key)} must be a whole number ≥ 0, got {_r(data[key])} — {fix}")

    cal_in = data.get("calibration")
    if cal_in is None:
        cal_in = {}
    if not isinstance(cal_in, dict):
        raise CaptureError(f"{where}: 'calibration' must be an object or null — {fix}")
    cal = dict(_CAL_DEFAULTS)
    cal.update(cal_in)
    if cal["profile"] is not None and not isinstance(cal["profile"], str):
        raise CaptureError(f"{where}: calibration.profile must be a string or null, got {_r(cal['profile'])} — {fix}")
    gains = cal["gain_v_per_fs"]
    if gains is not None:
        if not isinstance(gains, list) or len(gains) != len(names):
            raise CaptureError(
                f"{where}: calibration.gain_v_per_fs must list one gain per channel ({len(names)}), "
                f"got {_r(gains)} — {fix}"
            )
        for i, g in enumerate(gains):
            if g is not None and (not _is_number(g) or g <= 0):  # null: that channel stays in FS
                raise CaptureError(
                    f"{where}: calibration.gain_v_per_fs[{i}] must be a positive number of V/FS or null, "
                    f"got {_r(g)} — {fix}")
        cal["gain_v_per_fs"] = None if all(g is None for g in gains) else [
            None if g is None else float(g) for g in gains]
        gains = cal["gain_v_per_fs"]
    for key in ("timebase_ppm", "timebase_u_ppm"):
        if not _is_number(cal[key]):
            raise CaptureError(f"{where}: calibration.{key} must be a number of ppm, got {_r(cal[key])} — {fix}")
        cal[key] = float(cal[key])
    if cal["timebase_u_ppm"] < 0:
        raise CaptureError(
            f"{where}: calibration.timebase_u_ppm must be ≥ 0, got {_r(cal['timebase_u_ppm'])} — {fix}")
    if abs(cal["timebase_ppm"]) >= 1e5:
        raise CaptureError(
            f"{where}: calibration.timebase_ppm {_r(cal['timebase_ppm'])} is implausible (|ppm| ≥ 1e5) — {fix}"
        )
    tau = cal["coupling_tau_s"]
    if tau is not None:
        if not _is_number(tau) or tau <= 0:
            raise CaptureError(
                f"{where}: calibration.coupling_tau_s must be a positive number of s or null, got {_r(tau)} — {fix}")
        cal["coupling_tau_s"] = float(tau)
    floor = cal.pop("distortion_floor_pct", None)
    if floor is not None:
        if not _is_number(floor) or floor < 0 or floor >= 100:
            raise CaptureError(f"{where}: calibration.distortion_floor_pct must be a number of % in [0, 100) "
                               f"or null, got {floor!r} — {fix}")
        cal["distortion_floor_pct"] = float(floor)
    cal.pop("gain_u_rel", None)  # null is the same as missing: not known
    if cal_in.get("gain_u_rel") is not None:
        if gains is None:
            raise CaptureError(
                f"{where}: calibration.gain_u_rel is given but gain_v_per_fs is null (an uncertainty needs "
                f"its gain) — {fix}")
        cal["gain_u_rel"] = _gain_u_rel(cal_in["gain_u_rel"], len(names), where, fix, gains)
    out["calibration"] = cal
    return out


def _gain_u_rel(values: Any, n_channels: int, where: str, fix: str,
                gains: list[float | None] | None = None) -> list[float | None]:
    """Check ``calibration.gain_u_rel``: one finite number ≥ 0 per channel (null where the gain is null)."""
    if not isinstance(values, list) or len(values) != n_channels:
        raise CaptureError(
            f"{where}: calibration.gain_u_rel must list one relative uncertainty per channel ({n_channels}), "
            f"got {_r(values)} — {fix}")
    for i, u in enumerate(values):
        if u is None and gains is not None and gains[i] is None:
            continue  # no gain on this channel, so no gain uncertainty either
        if not _is_number(u) or u < 0:
            raise CaptureError(
                f"{where}: calibration.gain_u_rel[{i}] must be a finite number ≥ 0 (0.003 = 0.3 %), "
                f"got {_r(u)} — {fix}")
        if u >= 1:
            raise CaptureError(
                f"{where}: calibration.gain_u_rel[{i}] = {_r(u)} is a relative uncertainty of 100 % or more "
                f"(0.003 means 0.3 %) — {fix}")
    return [None if u is None else float(u) for u in values]


def read_sidecar(audio_path: str | os.PathLike[str]) -> dict[str, Any] | None:
    """Read and validate the sidecar of an audio file.

    Parameters
    ----------
    audio_path : str or Path
        Path of the audio file (not of the JSON).

    Returns
    -------
    dict or None
        The validated, normalised sidecar (see :func:`validate_sidecar`), or ``None`` when
        the audio file has no sidecar.

    Raises
    ------
    CaptureError
        The sidecar exists but cannot be read, is not JSON, or breaks the schema; the
        message names the JSON file.
    """
    path = sidecar_path(audio_path)
    if Path(audio_path).suffix.lower() == ".json" or not path.is_file():
        return None
    try:
        with open(path, "r", encoding="utf-8") as fh:
            data = json.load(fh, parse_constant=_reject_constant)
    except json.JSONDecodeError as e:
        raise CaptureError(
            f"{path}: sidecar is not valid JSON (line {e.lineno}, column {e.colno}: {e.msg}) — "
            "fix the sidecar, or delete it to read the audio without it"
        ) from e
    except RecursionError as e:
        raise CaptureError(f"{path}: sidecar is nested too deeply to be a benchfit sidecar — "
                           "fix the sidecar, or delete it to read the audio without it") from e
    except UnicodeDecodeError as e:
        raise CaptureError(f"{path}: sidecar is not UTF-8 text — fix or delete the sidecar") from e
    except ValueError as e:  # NaN/Infinity, or an integer with more digits than Python converts
        raise CaptureError(f"{path}: sidecar holds a number JSON or benchfit cannot use ({str(e)[:60]}) — "
                           "fix the sidecar, or delete it to read the audio without it") from e
    except OSError as e:
        raise CaptureError(f"{path}: sidecar cannot be read ({e.strerror or e}) — check its permissions") from e
    return validate_sidecar(data, str(path))


def write_sidecar(audio_path: str | os.PathLike[str], data: dict[str, Any], overwrite: bool = False) -> Path:
    """Write the sidecar of an audio file atomically.

    The JSON goes to a temporary file in the same directory, is flushed to disk and then
    renamed over the target (``os.replace``), so a reader never sees half a file.

    Parameters
    ----------
    audio_path : str or Path
        Path of the audio file the sidecar describes.
    data : dict
        Sidecar content; validated against the schema before anything is written.
    overwrite : bool, default False
        Replace an existing sidecar. Without it an existing sidecar is an error.

    Returns
    -------
    Path
        Path of the written JSON file.

    Raises
    ------
    CaptureError
        The data break the schema, the sidecar exists and ``overwrite`` is False, or the
        file cannot be written.
    """
    path = sidecar_path(audio_path)
    if Path(audio_path).suffix.lower() == ".json":
        raise CaptureError(
            f"{audio_path}: a sidecar belongs to an audio file, not to a .json file — pass the audio path")
    clean = validate_sidecar(data, f"{path} (data to write)")
    if path.exists() and not overwrite:
        raise CaptureError(f"{path}: sidecar already exists — choose another file name or allow overwriting")
    text = json.dumps(clean, indent=2, ensure_ascii=False) + "\n"
    try:
        if overwrite:
            write_text_atomic(path, text)
        else:  # created exclusively: a sidecar that appeared after the check above is kept
            write_bytes_new(path, text.encode("utf-8"))
    except FileExistsError as e:
        raise CaptureError(f"{path}: sidecar already exists — choose another file name or allow overwriting") from e
    except OSError as e:
        raise CaptureError(
            f"{path}: sidecar cannot be written ({e.strerror or e}) — check the folder exists and is writable"
        ) from e
    return path
