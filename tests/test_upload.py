"""Upload handling outside the app: bounded unzipping, pasted traces, trace preview (real files in tmp_path)."""

from __future__ import annotations

import io
import struct
import zipfile

import pytest

from catalog.errors import CatalogError, ValidationError
from catalog.ingest import upload


def _lying_zip(real: bytes, declared: int) -> bytes:
    """A zip whose one member (traces.csv) says it unpacks to ``declared`` bytes but really holds ``real``."""
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("traces.csv", real)
    data = bytearray(buffer.getvalue())
    # Patch the uncompressed size in the local header (offset 22) and in the central directory entry (offset 24).
    data[22:26] = struct.pack("<I", declared)
    central = data.rindex(b"PK\x01\x02")
    data[central + 24:central + 28] = struct.pack("<I", declared)
    return bytes(data)


def test_a_zip_member_is_stopped_on_its_real_size_not_its_declared_one(tmp_path):
    (tmp_path / "a").mkdir()
    bomb = _lying_zip(b"0" * (4 * 2**20), declared=1000)
    assert zipfile.ZipFile(io.BytesIO(bomb)).infolist()[0].file_size == 1000
    # The header lies: reading stops at the declared size and the CRC check then refuses the member; at no point
    # are the 4 MB really inside written out.
    with pytest.raises(CatalogError, match="damaged|unpacks to more than"):
        upload.stage_upload([upload.Upload("bomb.zip", bomb)], tmp_path / "a")
    written = sum(f.stat().st_size for f in (tmp_path / "a").rglob("*") if f.is_file())
    assert written <= 1000


def test_members_are_counted_against_the_budget_as_they_are_read(tmp_path):
    (tmp_path / "b").mkdir()
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("campaign/traces.csv", b"0" * (3 * 2**20))  # 3 MB of zeros compress to a few kB
    assert len(buffer.getvalue()) < 2**15
    with pytest.raises(CatalogError, match="unpacks to more than"):
        upload.stage_upload([upload.Upload("big.zip", buffer.getvalue())], tmp_path / "b", unzipped_limit=2**20)
    written = sum(f.stat().st_size for f in (tmp_path / "b").rglob("*") if f.is_file())
    assert written <= 2**20


def test_an_encrypted_member_gives_a_message(tmp_path):
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        archive.writestr("traces.csv", b"trial_id,time [s],value\n")
    data = bytearray(buffer.getvalue())
    data[6] |= 0x01  # general-purpose flag bit 0: encrypted (local header)
    central = data.rindex(b"PK\x01\x02")
    data[central + 8] |= 0x01
    with pytest.raises(CatalogError, match="encrypted"):
        upload.stage_upload([upload.Upload("locked.zip", bytes(data))], tmp_path)


def test_a_deflate64_member_gives_a_message(tmp_path):
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("traces.csv", b"trial_id,time [s],value\n")
    data = bytearray(buffer.getvalue())
    data[8:10] = struct.pack("<H", 9)  # compression method 9 = deflate64 (PKWARE APPNOTE 4.4.5)
    central = data.rindex(b"PK\x01\x02")
    data[central + 10:central + 12] = struct.pack("<H", 9)
    with pytest.raises(CatalogError, match="compression method"):
        upload.stage_upload([upload.Upload("d64.zip", bytes(data))], tmp_path)


def test_not_a_zip_gives_a_message(tmp_path):
    with pytest.raises(CatalogError, match="not a readable zip"):
        upload.stage_upload([upload.Upload("x.zip", b"plain text")], tmp_path)


def test_pasted_text_separators_and_header():
    assert upload.parse_trace_text("time,value\n0,0\n60,1.5\n").rows == [("0", "0"), ("60", "1.5")]
    assert upload.parse_trace_text("0\t0\n60\t1.5\n").rows == [("0", "0"), ("60", "1.5")]
    assert upload.parse_trace_text("0 0\n60   1.5\n").rows == [("0", "0"), ("60", "1.5")]


def test_decimal_comma_read_where_unambiguous():
    found = upload.parse_trace_text("t;v\n0;0\n60;1,5\n")
    assert found.rows == [("0", "0"), ("60", "1.5")]
    assert found.notes and "decimal comma" in found.notes[0]
    assert upload.parse_trace_text("0\t0,25\n").rows == [("0", "0.25")]


def test_decimal_comma_with_comma_separator_is_refused_by_line():
    with pytest.raises(ValidationError) as caught:
        upload.parse_trace_text("0,0\n60,9,8\n")
    (problem,) = caught.value.problems
    assert problem.row == 2 and "semicolon" in problem.message


def test_trace_preview_of_an_empty_file_is_located(tmp_path):
    from catalog.ingest import sources

    folder = tmp_path / "c"
    folder.mkdir()
    (folder / "catalysts.csv").write_text("catalyst_id,metal\nA,Pd\n")
    (folder / "trials.csv").write_text("trial_id,catalyst_id\nT1,A\n")
    (folder / "traces.csv").write_text("trial_id,time [s],value\nT1,0,0\nT1,60,1\n")
    head, n = upload.trace_preview(sources.read_source(folder))
    assert n == 2 and list(head.columns) == ["trial_id", "time [s]", "value"]
