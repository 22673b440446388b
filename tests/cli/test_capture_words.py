"""capture/ messages name Python parameters; the commands say their options (one translator).

``benchfit.capture`` is called from Python (``record(path, seconds, device=…)``,
``load(path, sample_rate=…)``, ``check_input(device, rate, channels)``): its errors and
warnings say the keyword a caller passes (``seconds:``, ``sample_format='mp3'``,
``overwrite=True``, ``sample_rate=``). ``benchfit.cli.common.cli_words`` turns them into the
options of the command that shows them; ``channels`` is the ``--channel`` selection, except in
the commands that open a sound card with a ``--channels`` count (record, calibrate, drift:
``COMMAND_FLAGS``). Project convention, no outside source. Every message here comes from a
real call with a bad argument; none opens an audio device (the argument checks come first).
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from benchfit.cli.common import cli_words, command_flags
from benchfit.errors import BenchfitError

#: a command-line option: two dashes and a letter after a space, a bracket or the start
FLAG = re.compile(r"(^|[\s(])--[a-z]")
#: a command line quoted in a message ('benchfit calibrate gain --profile NAME'): a command to run, allowed
COMMAND = re.compile(r"'benchfit [^']*'")

#: a CSV with neither a time column nor a sample interval: the caller must give the rate
NO_TIME_CSV = "output\n0.5\n0.4\n0.6\n0.5\n"


@pytest.fixture(autouse=True)
def _config(tmp_path, monkeypatch):
    """A private, empty calibration folder (no profile of the user's is read)."""
    monkeypatch.setenv("BENCHFIT_CONFIG_DIR", str(tmp_path / "cfg"))


def _error(call) -> str:
    with pytest.raises(BenchfitError) as err:
        call()
    return str(err.value)


def _capture_errors(tmp_path: Path) -> list[tuple[str, str, str, str]]:
    """(message, library words, command, command-line words) of real calls into benchfit.capture."""
    from benchfit.capture.calibration import check_profile_name
    from benchfit.capture.capture import Capture
    from benchfit.capture.csvfile import read_csv
    from benchfit.capture.devices import check_input
    from benchfit.capture.live import LiveWindows, record
    from benchfit.capture.live_blocks import record_blocks, stream_blocks
    from benchfit.capture.load import load

    new, existing = tmp_path / "new.wav", tmp_path / "old.wav"
    existing.write_bytes(b"")
    csv = tmp_path / "no_time.csv"
    csv.write_text(NO_TIME_CSV, encoding="utf-8")
    return [
        (_error(lambda: record(new, -1)), "seconds: must be a positive number of seconds, got -1 — e.g. seconds=10",
         "record", "--seconds: must be a positive number of seconds, got -1 — e.g. --seconds 10"),
        (_error(lambda: record(new, 1, sample_format="mp3")),
         "sample_format='mp3': unknown sample format", "record", "--sample-format mp3: unknown sample format"),
        (_error(lambda: record(existing, 1)), "already exists — choose another name or pass overwrite=True",
         "record", "already exists — choose another name or pass --overwrite"),
        (_error(lambda: record(new, 1, channels=2, names="drive")), "names='drive': give 2 non-empty name(s)",
         "record", "--names drive: give 2 non-empty name(s)"),
        (_error(lambda: record(new, 1, channels=2, names=["out", "OUT"])),
         "names='out,OUT': channel names must be different", "drift", "--names out,OUT: channel names must be"),
        (_error(lambda: record(new, 1, profile="nosuch")), "profile 'nosuch': no such calibration profile",
         "record", "--profile 'nosuch': no such calibration profile"),
        (_error(lambda: record(new, 1, profile="nosuch")), "profile 'nosuch': no such calibration profile",
         "calibrate show", "PROFILE 'nosuch': no such calibration profile"),
        (_error(lambda: check_profile_name("bad name")), "profile 'bad name': not a valid profile name",
         "calibrate gain", "--profile 'bad name': not a valid profile name"),
        (_error(lambda: check_input(None, 48000.0, 0)), "channels: must be a whole number ≥ 1, got 0",
         "record", "--channels: must be a whole number ≥ 1, got 0"),
        (_error(lambda: check_input(None, -1.0, 1)), "rate: must be a positive number of Hz, got -1.0",
         "calibrate gain", "--rate: must be a positive number of Hz, got -1.0"),
        (_error(lambda: LiveWindows(window_s=0.0)), "window_s: must be a positive number of seconds, got 0.0",
         "tune", "--window: must be a positive number of seconds, got 0.0"),
        # tune sets the hop itself: no option to name, the parameter stays
        (_error(lambda: LiveWindows(hop_s=0.0)), "hop_s: must be a positive number of seconds",
         "tune", "hop_s: must be a positive number of seconds"),
        (_error(lambda: next(stream_blocks(rate=48000, channels=1, interval_s=0.0))),
         "interval_s: 0.0 must be a positive number of seconds", "drift",
         "--interval: 0.0 must be a positive number of seconds"),
        (_error(lambda: record_blocks(list, path=str(new), rate=48000, channels=1, interval_s=1.0, seconds=-5.0)),
         "seconds: -5.0 must be a positive number of seconds", "drift",
         "--seconds: -5.0 must be a positive number of seconds"),
        (_error(lambda: load(csv, sample_rate=-5)), "sample_rate: -5 must be a positive number of Hz",
         "measure", "--sample-rate: -5 must be a positive number of Hz"),
        (_error(lambda: load(csv, sample_rate="fast")), "sample_rate: 'fast' is not a number",
         "fit", "--sample-rate: 'fast' is not a number"),
        (_error(lambda: read_csv(csv, sample_rate=-5.0)), "must be a positive number of Hz — pass e.g. sample_rate=50000",
         "measure", "must be a positive number of Hz — pass e.g. --sample-rate 50000"),
        (_error(lambda: load(csv)), "pass the sample rate in Hz (sample_rate=)",
         "fit", "pass the sample rate in Hz (--sample-rate)"),
        (_error(lambda: load(csv, sample_rate=1000, channels="")), "channels: '' selects nothing",
         "measure", "--channel: '' selects nothing"),
        (_error(lambda: Capture(np.zeros(8), sample_rate=0.0)), "check the file's sample rate, or give sample_rate=",
         "fit", "check the file's sample rate, or give --sample-rate"),
    ]


def test_capture_errors_name_parameters_and_the_cli_says_flags(tmp_path):
    cases = _capture_errors(tmp_path)
    for msg, library, command, cli in cases:
        assert library in msg and not FLAG.search(COMMAND.sub("", msg)) and "\n" not in msg, msg
        said = cli_words(msg, command_flags(command))
        assert cli in said, said
        assert cli_words(said, command_flags(command)) == said  # translating twice changes nothing


def test_command_flags_picks_the_longest_command_path():
    assert command_flags("benchfit calibrate show") == {"profile": "PROFILE"}
    assert command_flags("benchfit calibrate gain") == command_flags("record") == {"channels": "--channels"}
    assert command_flags("benchfit measure") == command_flags("tune") == command_flags("benchfit") == {}


def test_a_quoted_value_with_a_space_keeps_its_quotes_for_the_shell():
    # the device names PortAudio reports have spaces; the option takes them quoted
    assert cli_words("device='USB Audio CODEC': cannot open the input stream") == (
        "--device 'USB Audio CODEC': cannot open the input stream")
    assert cli_words('device="Bob\'s mic": no samples arrived') == '--device "Bob\'s mic": no samples arrived'
    assert cli_words("device='pulse': refuses 2 channel(s)") == "--device pulse: refuses 2 channel(s)"
    assert cli_words("device=3: no input device with that index") == "--device 3: no input device with that index"


def _one_error_line(res) -> str:
    assert res.returncode == 2 and not res.stdout, (res.stdout, res.stderr)
    lines = res.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and "Traceback" not in res.stderr, res.stderr
    return lines[0]


@pytest.mark.parametrize("args,line", [
    (["record", "{new}", "--seconds", "1", "--channels", "2", "--names", "drive"],
     "error: --names drive: give 2 non-empty name(s), comma-separated, one per channel"),
    (["record", "{new}", "--seconds", "1", "--profile", "nosuch"],
     "error: --profile 'nosuch': no such calibration profile (known: none yet) — create it with"),
    (["drift", "--channels", "2", "--names", "out,OUT"], "error: --names out,OUT: channel names must be different"),
    (["calibrate", "show", "nosuch"], "error: PROFILE 'nosuch': no such calibration profile"),
    (["measure", "{csv}"], "no time column and no sample interval in the file — pass the sample rate in Hz "
                           "(--sample-rate)"),
    (["fit", "{csv}"], "— pass the sample rate in Hz (--sample-rate)"),
])
def test_terminal_line_says_the_options(run, tmp_path, args, line):
    csv = tmp_path / "no_time.csv"
    csv.write_text(NO_TIME_CSV, encoding="utf-8")
    subs = {"{new}": str(tmp_path / "new.wav"), "{csv}": str(csv)}
    said = _one_error_line(run(*[subs.get(a, a) for a in args]))
    assert line in said and not re.search(r"\b(names|profile|sample_rate)=", said), said
    assert not (tmp_path / "new.wav").exists()


def test_real_entry_point_prints_the_option_in_one_line(tmp_path):
    env_dir = tmp_path / "cfg"
    r = subprocess.run([sys.executable, "-m", "benchfit", "record", str(tmp_path / "x.wav"), "--seconds", "1",
                        "--sample-format", "mp3"], capture_output=True, text=True, timeout=60,
                       env={**os.environ, "BENCHFIT_CONFIG_DIR": str(env_dir)})
    assert r.returncode == 2 and r.stderr.splitlines() == [
        "error: --sample-format mp3: unknown sample format — choose one of pcm24, float"], r.stderr
