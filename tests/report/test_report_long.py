"""`benchfit report` on a file with more samples than are held at once: measured in blocks, judged
the same way (threshold lowered by $BENCHFIT_BLOCK_SAMPLES for the test)."""

from __future__ import annotations

import json

from test_report_cli import SPEC, run, write_unit


def _report(path, out, capsys):
    code, stdout, err = run(["report", str(path), "--unit", "HC-02", "--spec", str(SPEC), "--out", str(out),
                             "--json"], capsys)
    assert code in (0, 1), err
    twin_path = json.loads(stdout)["json"]
    return code, json.loads(open(twin_path, encoding="utf-8").read()), open(twin_path, encoding="utf-8").read()


def test_a_long_file_is_reported_from_blocks_with_the_same_decisions(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("BENCHFIT_LOG", str(tmp_path / "log.sqlite"))
    monkeypatch.setenv("COLUMNS", "200")
    wav = write_unit(tmp_path / "hc02.wav", 50.02)
    code_w, whole, _ = _report(wav, tmp_path / "whole", capsys)
    monkeypatch.setenv("BENCHFIT_BLOCK_SAMPLES", "32768")  # 48,000 samples: 12 blocks of 4,096
    code_b, blocks, text = _report(wav, tmp_path / "blocks", capsys)
    assert code_b == code_w
    assert "measured in 12 blocks" in text and "the fit and the waveform figures use its first block" in text
    rw = {(r["quantity"], r["channel"]): r for r in whole["results"]}
    rb = {(r["quantity"], r["channel"]): r for r in blocks["results"]}
    assert rb.keys() == rw.keys()
    for key, r in rw.items():
        assert rb[key]["decision"] == r["decision"], key
        if r["as_left"]["value"] is not None and r["as_left"]["expanded_u"]:
            # the same samples: the values agree well inside the expanded uncertainty (k = 2)
            assert abs(rb[key]["as_left"]["value"] - r["as_left"]["value"]) < r["as_left"]["expanded_u"], key
