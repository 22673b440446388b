"""The public surface: __all__ is pinned and `import benchfit` is light."""

import subprocess
import sys

import benchfit

EXPECTED = {
    "BenchfitError", "Capture", "CaptureError", "ChannelMeasurement", "DesignError", "DeviceError",
    "FitError", "FitResult", "Harmonic", "InputCalibration", "LogError", "MeasureError",
    "Measurement", "SpecError", "__version__", "fit_lowpass", "fit_ringdown", "load", "measure",
    "record",
}


def test_all_is_pinned():
    assert set(benchfit.__all__) == EXPECTED


def test_every_export_resolves():
    for name in benchfit.__all__:
        assert getattr(benchfit, name) is not None


def test_import_and_help_do_not_load_heavy_modules():
    code = ("import sys, benchfit, benchfit.cli; benchfit.cli.get_app(); "
            "heavy = [m for m in ('numpy', 'scipy', 'matplotlib', 'sounddevice', 'lmfit', 'pandas') "
            "if m in sys.modules]; print(','.join(heavy))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_help_exits_zero():
    out = subprocess.run([sys.executable, "-m", "benchfit", "--help"], capture_output=True, text=True)
    assert out.returncode == 0
    assert "measure" in out.stdout
