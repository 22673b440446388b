"""Device errors name Python parameters; the commands say their options (a real sound card).

``benchfit.capture.devices`` resolves ``device=`` and checks ``channels=`` against the card:
its messages say ``device=99``, ``device='no-such-card'``, ``channels=40`` (the Python
keywords), and the command line says ``--device 99``, ``--device no-such-card`` and, in
``tune`` where the count follows ``--channel``, ``--channel 40`` (benchfit.cli.common.cli_words;
project convention, no outside source). The card is the null sink of the private PulseAudio
daemon (conftest.py); every case is refused before a stream opens.
"""

from __future__ import annotations

import json
import sys

import pytest

from benchfit.cli.common import cli_words, command_flags

pytestmark = pytest.mark.audio

#: the library's messages for three bad device arguments, printed as JSON by a fresh process
#: (PortAudio reads the sound server's address from the environment when it starts)
_LIBRARY_MESSAGES = """
import json
from benchfit.capture.devices import check_input, resolve_input_device
from benchfit.errors import BenchfitError
out = []
for call in (lambda: resolve_input_device(99), lambda: resolve_input_device("no-such-card"),
             lambda: check_input(None, 48000.0, 40)):
    try:
        call()
    except BenchfitError as e:
        out.append(str(e))
print(json.dumps(out))
"""


def _library_messages(rig) -> list[str]:
    import subprocess

    r = subprocess.run([sys.executable, "-c", _LIBRARY_MESSAGES], env=rig.env, capture_output=True, text=True,
                       timeout=60)
    assert r.returncode == 0, r.stderr
    return json.loads(r.stdout)


def test_device_messages_name_parameters_and_the_cli_says_flags(rig):
    by_index, by_name, too_many = _library_messages(rig)
    assert by_index.startswith("device=99: no input device with that index — choose one of "), by_index
    assert by_name.startswith("device='no-such-card': no input device of that name — choose one of "), by_name
    assert too_many.startswith("channels=40: device ") and "input channel(s) — ask for fewer" in too_many, too_many
    assert cli_words(by_index, command_flags("record")).startswith("--device 99: no input device with that index")
    assert cli_words(by_name, command_flags("tune")).startswith("--device no-such-card: no input device of that name")
    assert cli_words(too_many, command_flags("record")).startswith("--channels 40: device ")
    assert cli_words(too_many, command_flags("tune")).startswith("--channel 40: device ")


@pytest.mark.parametrize("args,start", [
    (["record", "{new}", "--seconds", "1", "--device", "99"], "error: --device 99: no input device with that index"),
    (["record", "{new}", "--seconds", "1", "--device", "no-such-card"],
     "error: --device no-such-card: no input device of that name"),
    (["tune", "--target", "50", "--channel", "40", "--plain", "--updates", "1"], "error: --channel 40: device "),
])
def test_device_error_line_says_the_options(rig, tmp_path, args, start):
    r = rig.benchfit(*[str(tmp_path / "new.wav") if a == "{new}" else a for a in args])
    lines = r.stderr.splitlines()
    assert r.returncode == 3 and len(lines) == 1 and lines[0].startswith(start), r.stderr
    assert "device=" not in r.stderr and "channels=" not in r.stderr and "Traceback" not in r.stderr
    assert not (tmp_path / "new.wav").exists()
