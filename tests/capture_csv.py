"""Test helper: write a Capture as the CSV a scope exports (a time column, one column per channel)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from benchfit.capture.capture import Capture


def write_capture_csv(path: Path, cap: Capture) -> Path:
    """``path`` with ``time (s)`` and one ``<name> (V)`` column per channel of ``cap``, 9 digits."""
    t = np.arange(cap.n_samples) / cap.sample_rate
    header = "time (s)," + ",".join(f"{n} (V)" for n in cap.channel_names)
    np.savetxt(path, np.column_stack([t, *cap.samples]), delimiter=",", header=header, comments="", fmt="%.9g")
    return path
