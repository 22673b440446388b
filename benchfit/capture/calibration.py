"""Sound-card calibration profiles: input gain, sample-clock error and input coupling.

A profile is a small TOML file in the user's configuration folder
(``platformdirs.user_config_dir("benchfit")/profiles/NAME.toml``, or
``$BENCHFIT_CONFIG_DIR/profiles/NAME.toml`` when that variable is set). It holds what one
sound card (at one input-level setting) was found to do:

* **gain** — volts per full-scale unit for each input channel, from a sine whose RMS the
  user read on a meter: ``V/FS = rms_known / rms_fitted_FS``. Its relative standard
  uncertainty combines the fit's own (statistical) part with the meter reading's
  (GUM, JCGM 100:2008 5.1.2, for a quotient of uncorrelated inputs):
  ``u_rel² = (u_fit/gain)² + (u_meter/rms_known)²``. When the user gives no meter
  uncertainty, :data:`DEFAULT_METER_HALF_WIDTH_REL` applies (see there);
* **timebase** — the sample-clock error in ppm, from a tone whose frequency the user
  trusts. Positive ppm means the card's clock runs fast, so the true sample rate is
  ``nominal · (1 + ppm·1e-6)``. With the frequency ``f_meas`` measured on the nominal
  rate and the trusted ``f_ref``: ``ppm = (f_ref / f_meas − 1)·1e6``;
* **coupling** — the time constant of the input's high-pass (AC coupling capacitor), from
  the droop of a low-frequency square wave.

Profiles act through the sidecar: ``record`` copies the profile's values into the
sidecar, and ``load`` applies them. Raw samples are never rewritten.

The pure estimators (arrays in, frozen dataclasses out) are in
:mod:`benchfit.measurement.calibration` and re-exported here; this module is the profile
store (TOML read with :mod:`tomllib`, written with :mod:`tomli_w`, atomically).
"""

from __future__ import annotations

import math
import os
import re
import tomllib
from dataclasses import asdict, dataclass, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Literal, overload

import numpy as np

from benchfit.capture.capture import InputCalibration
from benchfit.capture.fileio import write_text_atomic
from benchfit.errors import CaptureError
# the pure estimators live with the other computations; re-exported here for the CLI and tests
from benchfit.measurement.calibration import (CLIP_FS, DEFAULT_METER_HALF_WIDTH_REL, GainEstimate, clipped_samples,
                                              TimebaseEstimate, combine_gain_u_rel, default_meter_u,
                                              estimate_coupling, estimate_gain, estimate_timebase)

__all__ = [
    "ENV_CONFIG_DIR",
    "PROFILE_VERSION",
    "CLIP_FS",
    "clipped_samples",
    "DEFAULT_METER_HALF_WIDTH_REL",
    "default_meter_u",
    "combine_gain_u_rel",
    "ChannelGain",
    "TimebaseCalibration",
    "CouplingCalibration",
    "DistortionCalibration",
    "CalibrationProfile",
    "GainEstimate",
    "TimebaseEstimate",
    "estimate_gain",
    "estimate_timebase",
    "estimate_coupling",
    "config_dir",
    "profile_path",
    "check_profile_name",
    "list_profiles",
    "scan_profiles",
    "load_profile",
    "save_profile",
    "read_raw_wav",
    "utc_now_iso",
]

#: environment variable that moves the configuration folder (the tests use it)
ENV_CONFIG_DIR = "BENCHFIT_CONFIG_DIR"
#: version number written as ``benchfit_profile`` in every profile file
PROFILE_VERSION = 1


_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


# --------------------------------------------------------------------------------------
# profile data
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ChannelGain:
    """Gain of one input channel.

    Attributes
    ----------
    channel : int
        Input channel number, 1-based (1 = the card's first input).
    v_per_fs : float
        Volts per full-scale unit (V/FS).
    u_v_per_fs : float
        Standard uncertainty of ``v_per_fs`` from the sine fit alone (V/FS); the meter's
        own uncertainty is not included here (see ``gain_u_rel``).
    reference_rms_v : float
        The RMS voltage the user read on the meter (V).
    source : str
        File the gain was measured from.
    measured_utc : str
        When it was measured (ISO 8601, UTC).
    reference_u_v : float or None
        Standard uncertainty of the meter reading (V); None in profiles made before
        benchfit stored it.
    gain_u_rel : float or None
        Relative standard uncertainty of ``v_per_fs`` with the fit and the meter combined
        (:func:`combine_gain_u_rel`), e.g. 0.003 = 0.3 %; None when not known (old
        profiles), and then the levels' uncertainties leave the gain out.
    """

    channel: int
    v_per_fs: float
    u_v_per_fs: float
    reference_rms_v: float
    source: str = ""
    measured_utc: str = ""
    reference_u_v: float | None = None
    gain_u_rel: float | None = None


@dataclass(frozen=True)
class TimebaseCalibration:
    """Sample-clock error of the card.

    Attributes
    ----------
    ppm : float
        Clock error in parts per million; positive = the card's clock runs fast.
    u_ppm : float
        Standard uncertainty of ``ppm`` (fit and, when given, the reference's uncertainty).
    reference_hz : float
        The trusted frequency that was fed in (Hz).
    nominal_rate_hz : float
        The sample rate the card was asked for when it was measured (Hz).
    source, measured_utc : str
        Where and when it was measured.
    """

    ppm: float
    u_ppm: float
    reference_hz: float
    nominal_rate_hz: float
    source: str = ""
    measured_utc: str = ""


@dataclass(frozen=True)
class CouplingCalibration:
    """Time constant of the input's high-pass (AC coupling).

    Attributes
    ----------
    tau_s : float
        Time constant (s).
    channel : int
        Channel it was measured on (1-based).
    source, measured_utc : str
        Where and when it was measured.
    """

    tau_s: float
    channel: int = 1
    source: str = ""
    measured_utc: str = ""


@dataclass(frozen=True)
class DistortionCalibration:
    """The card's own distortion floor: THD_F of a clean loop (output to input) or reference sine.

    Attributes
    ----------
    floor_pct : float
        THD_F (%) of the recording over harmonics 2…``harmonics``; measure budgets every
        THD with it (± floor, rectangular) instead of treating the card as perfect.
    u_pct : float
        Standard uncertainty of ``floor_pct`` from the recording's noise (%).
    frequency_hz, level_fs : float
        Test tone frequency (Hz) and its peak level (FS): the floor holds near them.
    harmonics : int
        Highest harmonic order used.
    channel : int
        Channel it was measured on (1-based).
    source, measured_utc : str
        Where and when it was measured.
    """

    floor_pct: float
    u_pct: float
    frequency_hz: float
    level_fs: float
    harmonics: int = 10
    channel: int = 1
    source: str = ""
    measured_utc: str = ""


@dataclass(frozen=True)
class CalibrationProfile:
    """A named set of sound-card calibrations; any part may be missing.

    Attributes
    ----------
    name : str
        Profile name (letters, digits, ``_ . -``; up to 64 characters).
    gains : tuple of ChannelGain
        Per-channel gains, sorted by channel number.
    timebase : TimebaseCalibration or None
    coupling : CouplingCalibration or None
    """

    name: str
    gains: tuple[ChannelGain, ...] = ()
    timebase: TimebaseCalibration | None = None
    coupling: CouplingCalibration | None = None
    distortion: DistortionCalibration | None = None

    def gain_of(self, channel: int) -> ChannelGain | None:
        """The gain entry for a 1-based channel number, or None."""
        for g in self.gains:
            if g.channel == channel:
                return g
        return None

    def with_gain(self, gain: ChannelGain) -> "CalibrationProfile":
        """A copy with the gain of ``gain.channel`` set (others kept)."""
        kept = [g for g in self.gains if g.channel != gain.channel]
        return replace(self, gains=tuple(sorted(kept + [gain], key=lambda g: g.channel)))

    def gains_for(self, n_channels: int) -> tuple[float | None, ...] | None:
        """V/FS for input channels 1…n_channels (None for a channel the profile has no gain for), or
        None when it knows none of them. A one-channel profile on a stereo recording calibrates
        channel 1 and leaves channel 2 in FS."""
        gains = [self.gain_of(ch) for ch in range(1, n_channels + 1)]
        out = [None if g is None else g.v_per_fs for g in gains]
        return None if all(g is None for g in out) else tuple(out)

    def gain_u_rel_for(self, n_channels: int) -> tuple[float | None, ...] | None:
        """Relative gain uncertainties for channels 1…n_channels (None where the profile has no gain),
        or None unless every known gain has its uncertainty."""
        out: list[float | None] = []
        for ch in range(1, n_channels + 1):
            g = self.gain_of(ch)
            if g is not None and g.gain_u_rel is None:
                return None
            out.append(None if g is None else g.gain_u_rel)
        return None if all(u is None for u in out) else tuple(out)

    def missing_gains(self, n_channels: int) -> list[int]:
        """Channel numbers among 1…n_channels that have no gain in this profile."""
        return [ch for ch in range(1, n_channels + 1) if self.gain_of(ch) is None]

    def input_calibration(self, n_channels: int) -> InputCalibration:
        """The :class:`InputCalibration` a capture of ``n_channels`` inputs gets from this profile."""
        tb = self.timebase
        gains = self.gains_for(n_channels)
        return InputCalibration(
            profile=self.name,
            gain_v_per_fs=gains,
            gain_u_rel=self.gain_u_rel_for(n_channels) if gains is not None else None,
            timebase_ppm=tb.ppm if tb else 0.0,
            timebase_u_ppm=tb.u_ppm if tb else 0.0,
            coupling_tau_s=self.coupling.tau_s if self.coupling else None,
            distortion_floor_pct=self.distortion.floor_pct if self.distortion else None,
        )

    def sidecar_calibration(self, n_channels: int) -> dict[str, Any]:
        """The ``calibration`` object of a sidecar for a capture of ``n_channels`` inputs."""
        return self.input_calibration(n_channels).to_dict()

    # --- TOML mapping -------------------------------------------------------------------
    def to_toml_dict(self) -> dict[str, Any]:
        """Plain data for :mod:`tomli_w` (TOML has no null: absent parts are left out)."""
        out: dict[str, Any] = {"benchfit_profile": PROFILE_VERSION, "name": self.name}
        if self.timebase is not None:
            out["timebase"] = _drop_empty(asdict(self.timebase))
        if self.coupling is not None:
            out["coupling"] = _drop_empty(asdict(self.coupling))
        if self.distortion is not None:
            out["distortion"] = _drop_empty(asdict(self.distortion))
        if self.gains:
            out["gain"] = [_drop_empty(asdict(g)) for g in self.gains]
        return out

    @classmethod
    def from_toml_dict(cls, data: dict[str, Any], where: str) -> "CalibrationProfile":
        """Build a profile from parsed TOML, checking every value (CaptureError naming ``where``)."""
        fix = "fix the file or run the calibrate command again"
        if data.get("benchfit_profile") != PROFILE_VERSION:
            raise CaptureError(
                f"{where}: not a version-{PROFILE_VERSION} benchfit profile "
                f"(benchfit_profile = {data.get('benchfit_profile')!r}) — {fix}")
        name = data.get("name")
        if not isinstance(name, str) or not _NAME_RE.match(name):
            raise CaptureError(f"{where}: 'name' must be a profile name, got {name!r} — {fix}")
        try:
            gains = tuple(sorted((_gain_from(d) for d in data.get("gain", [])), key=lambda g: g.channel))
            tb = _timebase_from(data["timebase"]) if "timebase" in data else None
            cp = _coupling_from(data["coupling"]) if "coupling" in data else None
            dist = _distortion_from(data["distortion"]) if "distortion" in data else None
        except (TypeError, ValueError, KeyError) as e:
            raise CaptureError(f"{where}: {e} — {fix}") from e
        if len({g.channel for g in gains}) != len(gains):
            raise CaptureError(f"{where}: a channel has two [[gain]] entries — {fix}")
        return cls(name=name, gains=gains, timebase=tb, coupling=cp, distortion=dist)


def _drop_empty(d: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in d.items() if v is not None and v != ""}


def _number(d: dict[str, Any], key: str, *, positive: bool = False, nonneg: bool = False) -> float:
    if key not in d:
        raise KeyError(f"missing {key!r}")
    v = d[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise ValueError(f"{key!r} must be a finite number, got {v!r}")
    if positive and v <= 0:
        raise ValueError(f"{key!r} must be positive, got {v!r}")
    if nonneg and v < 0:
        raise ValueError(f"{key!r} must be zero or positive, got {v!r}")
    return float(v)


def _channel(d: dict[str, Any]) -> int:
    ch = d.get("channel", 1)
    if isinstance(ch, bool) or not isinstance(ch, int) or ch < 1:
        raise ValueError(f"'channel' must be a whole number ≥ 1, got {ch!r}")
    return ch


def _text(d: dict[str, Any], key: str) -> str:
    v = d.get(key, "")
    if not isinstance(v, str):
        raise ValueError(f"{key!r} must be text, got {v!r}")
    return v


def _gain_from(d: Any) -> ChannelGain:
    if not isinstance(d, dict):
        raise ValueError("every [[gain]] entry must be a table")
    # profiles written before the gain uncertainty was stored have neither optional key:
    # they load with None ("not known"), which the recorder and measure report as such
    ref_u = _number(d, "reference_u_v", nonneg=True) if "reference_u_v" in d else None
    u_rel = _number(d, "gain_u_rel", nonneg=True) if "gain_u_rel" in d else None
    return ChannelGain(channel=_channel(d), v_per_fs=_number(d, "v_per_fs", positive=True),
                       u_v_per_fs=_number(d, "u_v_per_fs", nonneg=True),
                       reference_rms_v=_number(d, "reference_rms_v", positive=True),
                       source=_text(d, "source"), measured_utc=_text(d, "measured_utc"),
                       reference_u_v=ref_u, gain_u_rel=u_rel)


def _timebase_from(d: Any) -> TimebaseCalibration:
    if not isinstance(d, dict):
        raise ValueError("[timebase] must be a table")
    ppm = _number(d, "ppm")
    if abs(ppm) >= 1e5:
        raise ValueError(f"'ppm' {ppm!r} is implausible (|ppm| ≥ 1e5)")
    return TimebaseCalibration(ppm=ppm, u_ppm=_number(d, "u_ppm", nonneg=True),
                               reference_hz=_number(d, "reference_hz", positive=True),
                               nominal_rate_hz=_number(d, "nominal_rate_hz", positive=True),
                               source=_text(d, "source"), measured_utc=_text(d, "measured_utc"))


def _distortion_from(d: Any) -> DistortionCalibration:
    if not isinstance(d, dict):
        raise ValueError("[distortion] must be a table")
    floor = _number(d, "floor_pct", nonneg=True)
    if floor >= 100:
        raise ValueError(f"'floor_pct' {floor!r} is implausible (≥ 100 %)")
    h = d.get("harmonics", 10)
    if isinstance(h, bool) or not isinstance(h, int) or h < 2:
        raise ValueError(f"'harmonics' must be a whole number ≥ 2, got {h!r}")
    return DistortionCalibration(floor_pct=floor, u_pct=_number(d, "u_pct", nonneg=True),
                                 frequency_hz=_number(d, "frequency_hz", positive=True),
                                 level_fs=_number(d, "level_fs", positive=True), harmonics=h,
                                 channel=_channel(d), source=_text(d, "source"),
                                 measured_utc=_text(d, "measured_utc"))


def _coupling_from(d: Any) -> CouplingCalibration:
    if not isinstance(d, dict):
        raise ValueError("[coupling] must be a table")
    return CouplingCalibration(tau_s=_number(d, "tau_s", positive=True), channel=_channel(d),
                               source=_text(d, "source"), measured_utc=_text(d, "measured_utc"))


# --------------------------------------------------------------------------------------
# reading a raw file for calibration
# --------------------------------------------------------------------------------------
def read_raw_wav(path: str | os.PathLike[str]) -> tuple[np.ndarray, float, tuple[str, ...]]:
    """Raw samples (channels, n) in FS, the nominal sample rate (Hz) and channel names.

    Calibration works on raw samples at the nominal rate, so an existing sidecar's gain and
    timebase are deliberately *not* applied; only its channel names are used.
    """
    import soundfile as sf

    from benchfit.capture.sidecar import read_sidecar

    p = Path(path)
    if not p.is_file():
        raise CaptureError(f"{p}: no such file — check the path")
    try:
        data, fs = sf.read(str(p), dtype="float64", always_2d=True)
    except (sf.LibsndfileError, RuntimeError, TypeError) as e:
        raise CaptureError(f"{p}: cannot be read as audio ({e}) — give a WAV or FLAC file") from e
    if data.shape[0] < 2:
        raise CaptureError(f"{p}: holds {data.shape[0]} samples — record longer")
    names: tuple[str, ...] = tuple(f"ch{i + 1}" for i in range(data.shape[1]))
    side = read_sidecar(p)
    if side is not None and len(side["channels"]) == data.shape[1]:
        names = tuple(ch["name"] for ch in side["channels"])
    return np.ascontiguousarray(data.T), float(fs), names


# --------------------------------------------------------------------------------------
# profile store
# --------------------------------------------------------------------------------------
def config_dir() -> Path:
    """benchfit's configuration folder: ``$BENCHFIT_CONFIG_DIR`` or the platform's user config dir."""
    env = os.environ.get(ENV_CONFIG_DIR)
    if env:
        return Path(env)
    from platformdirs import user_config_dir

    return Path(user_config_dir("benchfit"))


def check_profile_name(name: str) -> str:
    """Return ``name`` if it is a valid profile name, else raise CaptureError (one line)."""
    if not isinstance(name, str) or not _NAME_RE.match(name):
        raise CaptureError(
            f"profile {name!r}: not a valid profile name — use letters, digits, '_', '.', '-' "
            "(up to 64, starting with a letter or digit)")
    return name


def profile_path(name: str) -> Path:
    """Path of the TOML file of profile ``name``."""
    return config_dir() / "profiles" / f"{check_profile_name(name)}.toml"


def list_profiles() -> list[CalibrationProfile]:
    """Every readable profile, sorted by name (an unreadable file raises CaptureError)."""
    folder = config_dir() / "profiles"
    if not folder.is_dir():
        return []
    return [load_profile(p.stem) for p in sorted(folder.glob("*.toml")) if _NAME_RE.match(p.stem)]


def scan_profiles() -> tuple[list[CalibrationProfile], list[str]]:
    """Every readable profile, sorted by name, and one message per profile file that is broken.

    Unlike :func:`list_profiles` a malformed file does not stop the scan: its one-line
    ``CaptureError`` message is returned instead, so the other profiles can still be shown.
    """
    folder = config_dir() / "profiles"
    if not folder.is_dir():
        return [], []
    profiles: list[CalibrationProfile] = []
    problems: list[str] = []
    for p in sorted(folder.glob("*.toml")):
        if not _NAME_RE.match(p.stem):
            continue
        try:
            profiles.append(load_profile(p.stem))
        except CaptureError as e:
            problems.append(str(e))
    return profiles, problems


@overload
def load_profile(name: str, *, missing_ok: Literal[False] = False) -> CalibrationProfile: ...
@overload
def load_profile(name: str, *, missing_ok: bool) -> CalibrationProfile | None: ...
def load_profile(name: str, *, missing_ok: bool = False) -> CalibrationProfile | None:
    """Read profile ``name``.

    Parameters
    ----------
    name : str
        Profile name.
    missing_ok : bool
        Return None for a profile that does not exist instead of raising.

    Raises
    ------
    CaptureError
        The profile does not exist (unless ``missing_ok``), or its file is malformed.
    """
    path = profile_path(name)
    if not path.is_file():
        if missing_ok:
            return None
        known = ", ".join(p.stem for p in sorted((config_dir() / "profiles").glob("*.toml"))) or "none yet"
        raise CaptureError(
            f"profile {name!r}: no such calibration profile (known: {known}) — "
            "create it with 'benchfit calibrate gain|timebase|coupling --profile NAME'")
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except tomllib.TOMLDecodeError as e:
        raise CaptureError(f"{path}: not valid TOML ({e}) — fix or delete the profile file") from e
    except RecursionError as e:
        raise CaptureError(f"{path}: nested too deeply to be a calibration profile — fix or delete the "
                           "profile file") from e
    except OSError as e:
        raise CaptureError(f"{path}: cannot be read ({e.strerror or e}) — check its permissions") from e
    profile = CalibrationProfile.from_toml_dict(data, str(path))
    if profile.name != name:
        raise CaptureError(f"{path}: holds profile {profile.name!r}, not {name!r} — rename the file or fix 'name'")
    return profile


def save_profile(profile: CalibrationProfile) -> Path:
    """Write a profile atomically (temporary file + rename) and return its path."""
    import tomli_w

    path = profile_path(profile.name)
    text = tomli_w.dumps(profile.to_toml_dict())
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        write_text_atomic(path, text)
    except OSError as e:
        raise CaptureError(
            f"{path}: profile cannot be written ({e.strerror or e}) — check that the folder is writable "
            f"or set {ENV_CONFIG_DIR}") from e
    return path


def utc_now_iso() -> str:
    """The current time as ISO 8601 UTC with a ``Z`` (seconds resolution)."""
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")
