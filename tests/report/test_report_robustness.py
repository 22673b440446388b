"""Report files survive hostile user text: very long serials."""

from __future__ import annotations

from benchfit.report.html import report_stem, write_report


def test_a_240_character_serial_gives_a_file_name_the_file_system_takes(tmp_path):
    """Most file systems allow 255 bytes per name (POSIX NAME_MAX on ext4, XFS, APFS — from memory);
    a 240-character serial plus the time stamp used to fail with "File name too long"."""
    serial = "HC-" + "7" * 237
    other = "HC-" + "7" * 236 + "8"
    stem = report_stem(serial, "2026-12-01T21:00:00Z")
    assert len(stem.encode()) + len(".html") <= 255
    assert stem != report_stem(other, "2026-12-01T21:00:00Z")  # cut serials stay apart
    report = {"unit": serial, "created_utc": "2026-12-01T21:00:00Z"}
    html_path, json_path = write_report(report, "<html></html>", tmp_path)
    assert html_path.exists() and json_path.exists()
    assert serial in json_path.read_text(encoding="utf-8")  # the report keeps the whole serial
    assert report_stem("HC-07", "2026-12-01T21:00:00Z") == "HC-07_20261201T210000Z"  # short ones unchanged
