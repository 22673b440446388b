"""All of benchfit's figures (matplotlib, Agg, our own plain light design).

Every public function returns SVG text (a :class:`FigureSVG`, which is a ``str`` that
also keeps the matplotlib figure so :func:`save_figure` can write a PNG of it).
The SVGs are self-contained: text is drawn as paths (``svg.fonttype = "path"``), there
are no external references and no time stamp, so the same input gives the same bytes.

matplotlib is imported inside the functions: importing this module is cheap and the
command line's ``--help`` never loads it. No pyplot state is used: figures are built
with :class:`matplotlib.figure.Figure` directly and rendered by the Agg/SVG canvases that
``savefig`` picks from the format, so no backend is selected and nothing global changes.

Functions
---------
waveform_svg(capture, channel=0, model=None, periods=4)
    A few periods of one channel, with an optional model overlay.
spectrum_svg(channel_measurement)
    Harmonic amplitudes on a log scale.
fit_svg(fit_result)
    Data and model over time, |H| and phase at the harmonics, residuals.
drift_frequency_svg(drift_run)
    Frequency over a drift run, as ppm from the final value, with the warm-up band.
allan_svg(drift_run)
    Overlapping Allan deviation (log–log) with confidence intervals and the estimator floor.
save_figure(svg_or_fig, path)
    Write ``.svg`` or ``.png``.
"""

from __future__ import annotations

import io
import math
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["FigureSVG", "waveform_svg", "spectrum_svg", "measurement_svg", "fit_svg", "drift_frequency_svg",
           "allan_svg", "save_figure"]

# our own plain palette: ink for data, rust for models, moss for residuals, slate for grid
_INK = "#22313f"
_MODEL = "#b5523b"
_RESID = "#5b7f3a"
_GRID = "#d5dbe0"
_FACE = "#ffffff"
_RC: dict[Any, Any] = {  # matplotlib types the keys as a Literal of every rc name
    "svg.fonttype": "path",
    "svg.hashsalt": "benchfit",
    "font.size": 8.5,
    "axes.edgecolor": "#7a8793",
    "axes.linewidth": 0.7,
    "axes.facecolor": _FACE,
    "figure.facecolor": _FACE,
    "axes.grid": True,
    "grid.color": _GRID,
    "grid.linewidth": 0.6,
    "xtick.color": "#4a5561",
    "ytick.color": "#4a5561",
    "axes.labelcolor": "#22313f",
    "axes.titlesize": 9,
    "axes.titleweight": "bold",
    "legend.frameon": False,
    "legend.fontsize": 7.5,
}


class FigureSVG(str):
    """SVG text that also carries the matplotlib figure it was drawn from (for PNG output)."""

    figure: Any = None


def _new_figure(width_in: float, height_in: float):
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), dpi=100, layout="constrained")


def _plain_text(fig) -> None:
    """Titles, axis labels, legends and notes are plain text: a channel named "$x^$" is not mathtext.

    Only the tick labels keep mathtext (the log axes write their decades as 10^n with it); they
    are made by the axis formatters, never from user text.
    """
    from matplotlib.text import Text

    ticks = set()
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            ticks.update(axis.get_ticklabels(which="both"))
            ticks.add(axis.get_offset_text())
    for text in fig.findobj(Text):
        if text not in ticks:
            text.set_parse_math(False)


def _to_svg(fig) -> FigureSVG:
    import matplotlib

    buf = io.StringIO()
    _plain_text(fig)
    with matplotlib.rc_context(_RC):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": "benchfit"})
    out = FigureSVG(buf.getvalue())
    out.figure = fig
    return out


def _time_unit(span_s: float) -> tuple[float, str]:
    """Scale and label for a time axis covering ``span_s`` seconds."""
    if span_s < 2e-3:
        return 1e6, "µs"
    if span_s < 2.0:
        return 1e3, "ms"
    return 1.0, "s"


def waveform_svg(capture, channel: int | str = 0, model: np.ndarray | None = None,
                 periods: int = 4, model_label: str = "model") -> str:
    """A few periods of one channel of a capture, optionally with a model overlay.

    Parameters
    ----------
    capture : Capture
        The waveform (samples in V or FS, uniform sample rate in Hz).
    channel : int or str
        Channel index (0-based) or name.
    model : ndarray, optional
        Model samples aligned with the capture's first samples (same unit); it may be shorter
        than the capture (only the overlapping part is drawn).
    model_label : str
        Legend text of the model curve.
    periods : int
        Number of periods of the strongest spectral component to show (the whole record
        when no period can be found or the record is shorter).

    Returns
    -------
    str
        Self-contained SVG text (a :class:`FigureSVG`).
    """
    import matplotlib

    from benchfit.measurement.tone import dft_frequency_seed

    idx = capture.channel_index(channel)
    x = np.asarray(capture.samples[idx], dtype=float)
    fs = capture.sample_rate
    n = x.size
    f = dft_frequency_seed(x, fs) if n >= 16 else None
    if f and f > 0 and periods > 0:
        n_show = min(n, max(16, int(math.ceil(periods * fs / f))))
    else:
        n_show = n
    t = capture.t0 + np.arange(n_show) / fs
    scale, tu = _time_unit(n_show / fs)
    unit = capture.units[idx]
    with matplotlib.rc_context(_RC):
        fig = _new_figure(6.4, 2.8)
        ax = fig.add_subplot(1, 1, 1)
        ax.plot(t * scale, x[:n_show], color=_INK, lw=1.1, label="captured")
        if model is not None:
            m = np.asarray(model, dtype=float)
            k = min(m.size, n_show)  # a model aligned with the first samples; may be shorter
            if k:
                ax.plot(t[:k] * scale, m[:k], color=_MODEL, lw=1.0, ls="--", label=model_label)
        ax.set_xlabel(f"time ({tu})")
        ax.set_ylabel(f"{capture.channel_names[idx]} ({unit})")
        title = capture.channel_names[idx]
        if f:
            title += f" — {periods} periods at about {f:.4g} Hz"
        ax.set_title(title, loc="left")
        if model is not None:
            ax.legend(loc="upper right")
        return _to_svg(fig)


def spectrum_svg(channel_measurement) -> str:
    """Harmonic amplitudes of one measured channel on a log scale.

    Parameters
    ----------
    channel_measurement : ChannelMeasurement
        Uses ``harmonics`` (order, frequency in Hz, peak amplitude in the channel's unit)
        and, when present, each harmonic's ``amplitude_u`` as an error bar.

    Returns
    -------
    str
        Self-contained SVG text (a :class:`FigureSVG`).
    """
    import matplotlib

    cm = channel_measurement
    hs = list(cm.harmonics)
    with matplotlib.rc_context(_RC):
        fig = _new_figure(6.4, 2.8)
        ax = fig.add_subplot(1, 1, 1)
        if hs:
            orders = np.array([h.order for h in hs])
            amp = np.array([max(h.amplitude, 1e-300) for h in hs])
            ax.vlines(orders, amp.min() * 0.3, amp, color=_INK, lw=2.2)
            ax.plot(orders, amp, "o", color=_INK, ms=3.5)
            us = [h.amplitude_u for h in hs]
            if all(u is not None for u in us):
                ax.errorbar(orders, amp, yerr=np.array(us, dtype=float), fmt="none",
                            ecolor=_MODEL, elinewidth=0.8, capsize=2)
            ax.set_yscale("log")
            ax.set_ylim(amp.min() * 0.3, amp.max() * 3)
            ax.set_xticks(orders)
            if hs[0].frequency_hz:
                ax.set_xlabel(f"harmonic order (fundamental {hs[0].frequency_hz:.5g} Hz)")
            else:
                ax.set_xlabel("harmonic order")
        else:
            ax.text(0.5, 0.5, "no harmonics measured", ha="center", va="center",
                    transform=ax.transAxes, color=_INK)
            ax.set_xlabel("harmonic order")
        ax.set_ylabel(f"peak amplitude ({cm.unit})")
        title = f"{cm.name} harmonics"
        if cm.thd_pct is not None:
            title += f" — THD {cm.thd_pct:.3g} %"
        ax.set_title(title, loc="left")
        return _to_svg(fig)


def measurement_svg(capture, measurement, periods: int = 4) -> str:
    """One figure for ``measure --plot``: per channel, a few periods of the waveform and its harmonics.

    Parameters
    ----------
    capture : Capture
        The samples that were measured.
    measurement : Measurement
        Its result (harmonic amplitudes in the channel's unit, fundamental frequency in Hz).
    periods : int
        Periods of the fundamental shown (the whole record when there is no frequency).

    Returns
    -------
    str
        Self-contained SVG text (a :class:`FigureSVG`; PNG through :func:`save_figure`).
    """
    import matplotlib

    channels = list(measurement.channels)
    with matplotlib.rc_context(_RC):
        fig = _new_figure(9.0, 2.6 * len(channels))
        grid = fig.add_gridspec(len(channels), 2, width_ratios=(3, 2))
        for row, ch in enumerate(channels):
            idx = capture.channel_index(ch.name)
            x = np.asarray(capture.samples[idx], dtype=float)
            fs = capture.sample_rate
            f = ch.frequency_hz
            n_show = min(x.size, max(16, int(math.ceil(periods * fs / f)))) if f else x.size
            scale, tu = _time_unit(n_show / fs)
            ax = fig.add_subplot(grid[row, 0])
            ax.plot((capture.t0 + np.arange(n_show) / fs) * scale, x[:n_show], color=_INK, lw=1.1)
            ax.set_xlabel(f"time ({tu})")
            ax.set_ylabel(f"{ch.name} ({ch.unit})")
            ax.set_title(ch.name + (f" — {periods} periods of {f:.6g} Hz" if f else " — no period found"),
                         loc="left")
            ax_h = fig.add_subplot(grid[row, 1])
            hs = list(ch.harmonics)
            if hs:
                orders = np.array([h.order for h in hs])
                amp = np.array([max(h.amplitude, 1e-300) for h in hs])
                ax_h.vlines(orders, amp.min() * 0.3, amp, color=_INK, lw=2.2)
                ax_h.plot(orders, amp, "o", color=_INK, ms=3.5)
                ax_h.set_yscale("log")
                ax_h.set_ylim(amp.min() * 0.3, amp.max() * 3)
                ax_h.set_xticks(orders)
            else:
                ax_h.text(0.5, 0.5, "no harmonics measured", ha="center", va="center", transform=ax_h.transAxes,
                          color=_INK)
            ax_h.set_xlabel("harmonic order")
            ax_h.set_ylabel(f"peak amplitude ({ch.unit})")
            ax_h.set_title("harmonics" + (f" — THD {ch.thd_pct:.3g} %" if ch.thd_pct is not None else ""),
                           loc="left")
        return _to_svg(fig)


def fit_svg(fit_result, unit: str | None = None) -> str:
    """Figure of a fit: data and model over time, |H| and phase at the harmonics, residuals.

    Parameters
    ----------
    fit_result : FitResult
        Uses ``fit_result.curves`` (time in s; complex responses at the harmonic
        frequencies in Hz; residuals on the points actually fitted).
    unit : str, optional
        Unit of the captured samples (``"V"`` or ``"FS"``), shown on the waveform and residual
        axes; None when not known (the axes then say "capture unit").

    Returns
    -------
    str
        Self-contained SVG text (a :class:`FigureSVG`).
    """
    import matplotlib

    c = fit_result.curves
    has_h = c.harmonic_hz.size > 0
    su = unit or "capture unit"  # the samples' unit; H of a two-channel fit is V/V
    rows = 3 if has_h else 2
    with matplotlib.rc_context(_RC):
        fig = _new_figure(7.0, 2.3 * rows)
        grid = fig.add_gridspec(rows, 2) if has_h else fig.add_gridspec(rows, 1)
        ax_t = fig.add_subplot(grid[0, :])
        if not c.time_s.size:
            ax_t.text(0.5, 0.5, "no waveform kept with this result", ha="center", va="center",
                      transform=ax_t.transAxes, color=_INK)
        if c.time_s.size:
            scale, tu = _time_unit(float(c.time_s[-1] - c.time_s[0]) if c.time_s.size > 1 else 1.0)
            ax_t.plot(c.time_s * scale, c.data, color=_INK, lw=1.0, label="data")
            if c.model.size == c.time_s.size:
                ax_t.plot(c.time_s * scale, c.model, color=_MODEL, lw=1.0, ls="--", label="model")
            ax_t.set_xlabel(f"time ({tu})")
            ax_t.legend(loc="upper right")
        ax_t.set_ylabel(f"ring, baseline included ({su})" if fit_result.method == "ringdown" else f"output ({su})")
        nrmse = fit_result.quality.nrmse
        quality = (f" — NRMSE {100 * nrmse:.3g} %" if isinstance(nrmse, (int, float)) and math.isfinite(nrmse)
                   else "")
        ax_t.set_title(f"{fit_result.model} fit ({fit_result.method}){quality}", loc="left")
        if has_h:
            f = c.harmonic_hz
            ax_m = fig.add_subplot(grid[1, 0])
            ax_p = fig.add_subplot(grid[1, 1])
            hm = np.abs(c.h_measured)
            if c.h_measured_u.size == f.size:
                ax_m.errorbar(f, hm, yerr=c.h_measured_u, fmt="o", color=_INK, ms=3.5,
                              elinewidth=0.8, capsize=2, label="measured")
            else:
                ax_m.plot(f, hm, "o", color=_INK, ms=3.5, label="measured")
            has_model = c.h_model.size == f.size
            # phases wrapped to (−180°, 180°], the range a phase meter shows; both series the same way
            ph_meas = np.degrees(np.angle(c.h_measured))
            if has_model:
                ph_model = np.degrees(np.angle(c.h_model))
            ax_p.plot(f, ph_meas, "o", color=_INK, ms=3.5, label="measured")
            if has_model:
                ax_m.plot(f, np.abs(c.h_model), "s", mfc="none", color=_MODEL, ms=5, label="model")
                ax_p.plot(f, ph_model, "s", mfc="none", color=_MODEL, ms=5, label="model")
            ax_m.set_yscale("log")
            for ax in (ax_m, ax_p):
                ax.set_xscale("log")
                ax.set_xlabel("frequency (Hz)")
            if fit_result.method == "one-channel":  # output phasors: the drive level is unknown
                ax_m.set_ylabel(f"output |Y_k| ({su} peak)")
                ax_m.set_title("output harmonics", loc="left")
                ax_p.set_title("output phase", loc="left")
            else:
                ax_m.set_ylabel("|H| (V/V)")
                ax_m.set_title("magnitude at the harmonics", loc="left")
                ax_p.set_title("phase at the harmonics", loc="left")
            ax_p.set_ylabel("phase (°)")
            ax_m.legend(loc="lower left")
            ax_r = fig.add_subplot(grid[2, :])
        else:
            ax_r = fig.add_subplot(grid[1, 0])
        r = np.asarray(c.residual, dtype=float)
        if r.size:
            ax_r.plot(np.arange(r.size), r, ".", color=_RESID, ms=2.5)
            ax_r.axhline(0.0, color="#7a8793", lw=0.7)
        if has_h and r.size == 2 * c.harmonic_hz.size:
            ax_r.set_xlabel("fitted point (real parts at the harmonics, then imaginary parts)")
        else:
            ax_r.set_xlabel("fitted point")
        in_h = has_h and r.size == 2 * c.harmonic_hz.size and fit_result.method != "one-channel"
        ax_r.set_ylabel("residual (V/V)" if in_h else f"residual ({su})")
        ax_r.set_title("residuals (data − model)", loc="left")
        return _to_svg(fig)


def drift_frequency_svg(drift_run) -> str:
    """Frequency of every interval of a drift run (the JSON contract of ``benchfit drift``).

    Plotted as the deviation from the run's final frequency in ppm, phase-continuous values
    (with their standard uncertainty as error bars when visible), the ±band of the warm-up
    criterion around zero and a vertical line at the warm-up time.
    """
    import matplotlib

    st = drift_run["stability"]
    rows = [r for r in drift_run["series"] if r.get("frequency_hz") is not None]
    ref = st["final_frequency_hz"]
    t = np.array([r["t_start_s"] if r.get("chain_frequency_hz") is not None else r["t_mid_s"] for r in rows])
    ppm = np.array([(r["frequency_hz"] - ref) / ref * 1e6 for r in rows])
    u = np.array([(r["frequency_u_hz"] or 0.0) / ref * 1e6 for r in rows])
    scale, unit = (60.0, "min") if t.size and t[-1] > 600 else (1.0, "s")
    if t.size and t[-1] > 3 * 3600:
        scale, unit = 3600.0, "h"
    with matplotlib.rc_context(_RC):
        fig = _new_figure(6.4, 2.8)
        ax = fig.add_subplot(1, 1, 1)
        band = st["warmup_band_ppm"]
        ax.axhspan(-band, band, color=_GRID, alpha=0.6, lw=0, label=f"±{band:g} ppm of the final value")
        if u.size and np.median(u) > 0.02 * max(np.ptp(ppm), 1e-12):
            ax.errorbar(t / scale, ppm, yerr=u, fmt="none", ecolor=_MODEL, elinewidth=0.6)
        ax.plot(t / scale, ppm, ".", color=_INK, ms=2.0, label="phase-continuous frequency")
        if st.get("warmup_s"):
            ax.axvline(st["warmup_s"] / scale, color=_RESID, lw=1.0,
                       label=f"warm-up {st['warmup_s']:.0f} s")
        ax.set_xlabel(f"time from start ({unit})")
        ax.set_ylabel(f"ppm from {ref:.6f} Hz")
        ax.set_title(f"{drift_run['channel']} frequency — drift {st['drift_ppm_per_h']:.3g} ± "
                     f"{st['drift_u_ppm_per_h']:.2g} ppm/h", loc="left")
        ax.legend(loc="lower right")
        return _to_svg(fig)


def allan_svg(drift_run) -> str:
    """Overlapping Allan deviation σ_y(τ) of a drift run on log–log axes.

    Points with their 68 % confidence intervals (chi-squared with the Greenhall–Riley
    equivalent degrees of freedom), and the estimator's white-PM floor √3·σ_x/τ dashed.
    """
    import matplotlib

    pts = drift_run["stability"]["adev"]
    with matplotlib.rc_context(_RC):
        fig = _new_figure(6.4, 3.0)
        ax = fig.add_subplot(1, 1, 1)
        if pts:
            tau = np.array([p["tau_s"] for p in pts])
            dev = np.array([p["adev"] for p in pts])
            lo = np.array([p["ci_low"] for p in pts])
            hi = np.array([p["ci_high"] for p in pts])
            floor = np.array([p["floor"] for p in pts])
            ax.errorbar(tau, dev, yerr=np.vstack([dev - lo, hi - dev]), fmt="o-", color=_INK, ms=3.5, lw=1.0,
                        ecolor=_MODEL, elinewidth=0.9, capsize=2, label="σ_y(τ), 68 % interval")
            ax.plot(tau, floor, "--", color=_RESID, lw=1.0, label="estimator floor (white PM)")
            ax.set_xscale("log")
            ax.set_yscale("log")
        else:
            ax.text(0.5, 0.5, "run too short for an Allan deviation", ha="center", va="center",
                    transform=ax.transAxes, color=_INK)
        ax.set_xlabel("averaging time τ (s)")
        ax.set_ylabel("Allan deviation σ_y(τ)")
        ax.set_title("overlapping Allan deviation (IEEE Std 1139), drift removed", loc="left")
        ax.legend(loc="best")
        return _to_svg(fig)


def save_figure(svg_or_fig, path: str | Path, *, overwrite: bool = True) -> Path:
    """Write a figure to ``path`` as SVG or PNG, chosen by the suffix.

    Parameters
    ----------
    svg_or_fig : FigureSVG, str or matplotlib Figure
        What one of this module's functions returned, or a matplotlib figure. Plain SVG text
        without a figure can only be written as ``.svg``.
    path : str or Path
        Target file; suffix ``.svg`` or ``.png``.
    overwrite : bool, default True
        False: never replace a file, even one made while the figure was drawn (the file is
        created exclusively at the moment of writing).

    Returns
    -------
    Path
        The path written.
    """
    import matplotlib

    from benchfit.errors import BenchfitError

    p = Path(path)
    suffix = p.suffix.lower()
    if suffix not in (".svg", ".png"):
        raise BenchfitError(f"{p}: unknown figure type {p.suffix!r} — use a .svg or .png file name")
    fig = getattr(svg_or_fig, "figure", None) if isinstance(svg_or_fig, str) else svg_or_fig
    from benchfit.capture.fileio import write_bytes_new

    try:
        if suffix == ".svg":
            text = str(svg_or_fig) if isinstance(svg_or_fig, str) else str(_to_svg(fig))
            data = text.encode("utf-8")
        else:
            if fig is None:
                raise BenchfitError(f"{p}: this SVG text carries no figure to render as PNG — "
                                    "save it as .svg, or pass the figure function's result unchanged")
            buf = io.BytesIO()
            with matplotlib.rc_context(_RC):
                fig.savefig(buf, format="png", dpi=150, metadata={"Software": "benchfit"})
            data = buf.getvalue()
        write_bytes_new(p, data, overwrite=overwrite)
    except FileExistsError as e:
        raise BenchfitError(f"{p}: file exists (it appeared while the figure was drawn) — choose another "
                            "path or add overwrite=True") from e
    except OSError as e:
        raise BenchfitError(f"{p}: cannot write the figure ({e.strerror}) — check the folder exists "
                            "and is writable") from e
    return p
