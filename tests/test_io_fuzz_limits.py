"""The readers' ceilings and refusals of contradictory inputs (the cases the mutation fuzzer found).

Each case is one malformed or contradictory input and the one-line refusal it must get; the memory
bound is measured with the standard library's tracemalloc (peak of Python allocations, numpy's
included), never with a timer.
"""

from __future__ import annotations

import json
import struct
import tracemalloc
import zipfile
from pathlib import Path

import numpy as np
import pytest

from synth.errors import FormatError, ParameterError, SynthError
from synth.io import read_fields, read_offsets, read_sidecar, write_fields
from synth.io.limits import MAX_BLOCKS, MAX_PICTURE_SIDE, max_blocks_for
from synth.synthesis.params import SynthParams

COLS = ["x", "y", "w", "h", "dx", "dy", "intra"]


def _field_doc(width, height, blocks, *, gaps=True, coded=8.0):
    return {
        "format": "synth-vector-field", "schema_version": 1, "width": width, "height": height,
        "fields": [{"coded_time": coded, "reference_time": 0.0, "gaps_allowed": gaps, "columns": COLS,
                    "blocks": blocks}],
    }  # fmt: skip


def _peak(call) -> tuple[int, BaseException | None]:
    tracemalloc.start()
    err = None
    try:
        call()
    except BaseException as exc:  # noqa: BLE001 - returned to the test
        err = exc
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak, err


def test_ceilings_are_the_documented_values():
    # io/FORMATS.md, "Ceilings": 16384 samples a side; 4x4 blocks of that picture
    assert MAX_PICTURE_SIDE == 16384
    assert MAX_BLOCKS == 4096 * 4096
    assert max_blocks_for(352, 288) == 88 * 72


def test_a_65536_sample_field_on_a_352x288_clip_allocates_next_to_nothing(tmp_path):
    """The 300-byte file of the issue: 65536x65536 with gaps_allowed, read for a 352x288 clip."""
    path = tmp_path / "huge.json"
    path.write_text(json.dumps(_field_doc(65536, 65536, [[0, 0, 16, 16, 0, 0, 0]])))
    assert path.stat().st_size < 400
    peak, err = _peak(lambda: read_fields(path, width=352, height=288))
    assert isinstance(err, FormatError)
    assert "picture size 65536x65536 does not match the clip's 352x288" in str(err)
    assert peak < 50 * 2**20, peak
    # without a clip to compare with, the ceiling refuses it
    peak, err = _peak(lambda: read_fields(path))
    assert isinstance(err, FormatError) and "must be in 1..16384, got 65536" in str(err)
    assert peak < 50 * 2**20, peak


def test_a_field_of_the_largest_picture_is_checked_on_its_block_grid(tmp_path):
    """16384x16384 with gaps and one 16x16 block: the coverage map is per 16x16 cell (1 MiB of
    owners), not per sample (1 GiB)."""
    path = tmp_path / "big.json"
    path.write_text(json.dumps(_field_doc(16384, 16384, [[0, 0, 16, 16, 0, 0, 0]])))
    peak, err = _peak(lambda: read_fields(path))
    assert err is None
    assert peak < 50 * 2**20, peak


def test_more_blocks_than_fit_the_picture_are_refused_before_any_array(tmp_path):
    path = tmp_path / "many.json"
    path.write_text(json.dumps(_field_doc(8, 8, [[0, 0, 4, 4, 0, 0, 0]] * 5)))
    with pytest.raises(FormatError, match=r"field 0: 5 blocks cannot fit a 8x8 picture \(at most 4 blocks"):
        read_fields(path)


@pytest.mark.parametrize(
    "value, message",
    [
        ("[1, 2]", r"block 0 \(x=0, y=0\): dx must be an integer, got \[1, 2\]"),
        ('{"a": 1}', r"dx must be an integer, got \{'a': 1\}"),
        ("9" * 4301, r"an integer of 4301 digits \(at most 40 are read\)"),
        ("true", r"dx must be an integer, got True"),
        ("1e999", r"dx must be a finite integer, got inf"),
    ],
)
def test_a_block_value_of_the_wrong_kind_is_named(tmp_path, value, message):
    text = json.dumps(_field_doc(16, 16, [[0, 0, 16, 16, 0, 0, 0]], gaps=False)).replace(
        "[0, 0, 16, 16, 0, 0, 0]", f"[0, 0, 16, 16, {value}, 0, 0]"
    )
    path = tmp_path / "f.json"
    path.write_text(text)
    with pytest.raises(FormatError, match=message):
        read_fields(path)


@pytest.mark.parametrize(
    "time, message",
    [
        ("1" + "0" * 39, r"coded_time must be a number of magnitude at most 2\*\*31"),
        ("NaN", r"coded_time must be finite, got nan"),
        ("[8]", r"coded_time must be a number, got \[8\]"),
    ],
)
def test_a_time_beyond_range_is_refused_before_conversion(tmp_path, time, message):
    text = json.dumps(_field_doc(16, 16, [[0, 0, 16, 16, 0, 0, 0]], gaps=False, coded="@T@"))
    path = tmp_path / "t.json"
    path.write_text(text.replace('"@T@"', time))
    with pytest.raises(FormatError, match=message):
        read_fields(path)


def _valid_npz(tmp_path) -> Path:
    from synth.field import VectorField

    f = VectorField(16, 16, 8.0, 0.0, *(np.array([v], np.int32) for v in (0, 0, 16, 16, 4, 0)), np.array([False]))
    path = tmp_path / "f.npz"
    write_fields(path, [f])
    return path


def test_damaged_npz_members_name_the_file(tmp_path):
    path = _valid_npz(tmp_path)
    data = bytearray(path.read_bytes())
    with zipfile.ZipFile(path) as z:
        info = z.getinfo("field0_blocks.npy")
    name_len, extra_len = struct.unpack("<HH", data[info.header_offset + 26 : info.header_offset + 30])
    start = info.header_offset + 30 + name_len + extra_len  # the local header's own lengths (PKWARE APPNOTE 4.3.7)
    data[start + 5] ^= 0xFF  # inside the deflated data: zlib error or CRC mismatch
    bad = tmp_path / "bad.npz"
    bad.write_bytes(bytes(data))
    with pytest.raises(FormatError, match=r"bad\.npz: not a readable \.npz archive"):
        read_fields(bad)
    data = bytearray(path.read_bytes())
    central = data.find(b"PK\x01\x02")
    while data[central + 46 : central + 46 + len(info.filename)] != info.filename.encode():
        central = data.find(b"PK\x01\x02", central + 4)
    data[central + 10] = 99  # the central directory's compression method (APPNOTE 4.3.12): 99 is unsupported
    odd = tmp_path / "method.npz"
    odd.write_bytes(bytes(data))
    with pytest.raises(FormatError, match=r"method\.npz: not a readable \.npz archive"):
        read_fields(odd)


def test_an_npz_member_declaring_a_huge_array_is_refused_before_reading(tmp_path):
    from numpy.lib import format as npy

    path = tmp_path / "huge.npz"
    header = {"descr": "<i4", "fortran_order": False, "shape": (10**9, 7)}
    import io as stdio

    buf = stdio.BytesIO()
    npy.write_array_header_1_0(buf, header)
    with zipfile.ZipFile(path, "w") as z:
        z.writestr("field0_blocks.npy", buf.getvalue() + b"\0" * 28)
    peak, err = _peak(lambda: read_fields(path))
    assert isinstance(err, FormatError) and "declares 28000000000 bytes of data, its member holds 28" in str(err)
    assert peak < 50 * 2**20


def test_offsets_made_for_another_picture_size_name_both_sizes(tmp_path):
    from synth.io import write_offsets
    from synth.offset_field import OffsetField

    off = OffsetField.from_blocks(width=32, height=16, time=4.0, x=[0, 16], y=[0, 0], w=16, h=16, dx=[1, 0], dy=[0, 2])
    path = tmp_path / "o.json"
    write_offsets(path, off)
    field, _ = read_offsets(path, width=32, height=16)
    assert (field.width, field.height) == (32, 16)
    with pytest.raises(FormatError, match=r"o\.json: offsets made for 32x16 pictures, the clip's are 352x288"):
        read_offsets(path, width=352, height=288)


def test_a_raw_file_whose_geometry_leaves_a_remainder_is_refused(tmp_path):
    from synth.io import RawYUVReader

    path = tmp_path / "clip_16x16.yuv"
    path.write_bytes(bytes(384 * 2 + 100))  # 16x16 4:2:0 8-bit frames are 384 bytes
    with pytest.raises(FormatError, match=r"not a multiple of the frame size 384 bytes .* 2 whole frames and 100"):
        RawYUVReader(path)


def test_clip_sides_above_the_ceiling_are_refused(tmp_path):
    from synth.io import Y4MReader

    path = tmp_path / "wide.y4m"
    path.write_bytes(b"YUV4MPEG2 W16386 H2 C444\nFRAME\n")
    with pytest.raises(FormatError, match=r"16386x2 pictures are beyond the largest side synth reads \(16384"):
        Y4MReader(path)


def test_parameter_files_refuse_what_the_fuzzer_found(tmp_path):
    path = tmp_path / "p.json"
    cases = {
        b'{"format": "synth-params", "schema_version": 1, "params": {"reach": 4\xff}}': r"p\.json: not UTF-8 text",
        b'{"format": "synth-params", "schema_version": 1, "params": {"reach": 1' + b"0" * 400 + b"}}": "401 digits",
        b'{"format": "synth-params", "schema_version": 1, "params": {"reach": 1e999}}': "reach must be a finite",
        b'{"format": "synth-params", "schema_version": 1, "params": {"group_size": 8.0}}': (
            r"p\.json: parameter group_size must be 1, 2, 4 or 8, got 8\.0"
        ),
        b'{"format": "synth-params", "schema_version": 1, "params": {"candidates": [8]}}': (
            r"parameter candidates must be an integer in \[1, 32\], got \[8\]"
        ),
        b'{"format": "synth-params", "schema_version": 1, "params": {"reliability_coefficients": [1e308, '
        b"1" + b"0" * 39 + b"]}}": r"reliability_coefficients must hold 91 numbers",
    }
    for data, message in cases.items():
        path.write_bytes(data)
        with pytest.raises(SynthError, match=message):
            SynthParams.load(path)
    with pytest.raises(ParameterError, match="must be a finite number"):
        SynthParams(reach=10**400)


def test_group_size_1_is_refused_on_subsampled_chroma_and_works_on_444():
    """Root cause of the reshape error: a candidate group must span whole chroma samples (the
    synthesiser maps a group onto group_size / 2 chroma rows in 4:2:0)."""
    from synth import synthesise
    from synth.field import VectorField
    from synth.picture import Picture

    rng = np.random.default_rng(3)
    y = rng.integers(0, 256, (16, 16), dtype=np.uint8)
    params = SynthParams(group_size=1, weight_cell=1)
    f = VectorField(16, 16, 8.0, 0.0, *(np.array([v], np.int32) for v in (0, 0, 16, 16, 4, 0)), np.array([False]))
    c420 = np.full((8, 8), 128, np.uint8)
    past420 = Picture(y, c420, c420, "420", 8)
    with pytest.raises(ParameterError, match=r"group_size 1 is smaller than a 420 chroma sample .*use 2 or more"):
        synthesise(past420, past420, [f], t=0.5, params=params)
    c444 = np.full((16, 16), 128, np.uint8)
    past444 = Picture(y, c444, c444, "444", 8)
    out = synthesise(past444, past444, [f], t=0.5, params=params)
    # two identical references: every observation is the reference itself (exact, common practice)
    assert out.same_format(past444)


def test_a_manifest_value_outside_its_set_gets_a_message(tmp_path):
    from synth.study import load_manifest

    (tmp_path / "c.y4m").write_bytes(b"YUV4MPEG2 W16 H16\n" + (b"FRAME\n" + bytes(384)) * 3)
    path = tmp_path / "s.toml"
    path.write_text('[[clips]]\npath = "c.y4m"\n[[tasks]]\nkind = "rd"\nfixed = { offset_block = 12 }\n')
    with pytest.raises(ParameterError, match=r"tasks\[0\]\.fixed\.offset_block: must be one of 8, 16, 32, got 12"):
        load_manifest(path)
    path.write_text('[[clips]]\npath = "c.y4m"\n[[tasks]]\nkind = "gop"\ngrid = { size = [4, 3] }\n')
    with pytest.raises(ParameterError, match=r"tasks\[0\]\.grid\.size\[1\]: must be one of 2, 4, 8"):
        load_manifest(path)


def test_a_300_character_clip_path_is_one_clean_line(tmp_path):
    from synth.study import load_manifest

    path = tmp_path / "s.toml"
    path.write_text(f'[[clips]]\npath = "{"a" * 300}.y4m"\n[[tasks]]\nkind = "blend"\n')
    with pytest.raises(
        ParameterError, match=r"s\.toml: clips\[0\]\.path: cannot use 'a+\.\.\.': File name too long"
    ) as e:
        load_manifest(path)
    assert "\n" not in str(e.value) and len(str(e.value)) < 200


def test_a_sidecar_from_another_run_is_refused_naming_both_counts(tmp_path):
    doc = {
        "format": "synth-reference-sidecar", "schema_version": 1, "output": "r.y4m", "container": "y4m",
        "width": 32, "height": 32, "chroma_format": "420", "bit_depth": 8, "frame_rate": "25/1", "gop": 2,
        "pictures": [{"position": k, "time": 2 * k + 1, "past": 2 * k, "future": 2 * k + 2, "t": 0.5, "layer": 1}
                     for k in range(12)],
    }  # fmt: skip
    path = tmp_path / "r.y4m.json"
    path.write_text(json.dumps(doc))
    assert len(read_sidecar(path, pictures=12, width=32, height=32)["pictures"]) == 12
    with pytest.raises(FormatError, match=r"the sidecar lists 12 pictures, the clip holds 14"):
        read_sidecar(path, pictures=14)


def test_a_png_declaring_a_huge_picture_is_refused_before_decoding(tmp_path):
    import zlib

    from synth.io import ImageSequenceReader

    ihdr = (40000).to_bytes(4, "big") + (40000).to_bytes(4, "big") + bytes([8, 2, 0, 0, 0])
    chunk = b"IHDR" + ihdr
    png = b"\x89PNG\r\n\x1a\n" + len(ihdr).to_bytes(4, "big") + chunk + zlib.crc32(chunk).to_bytes(4, "big")
    path = tmp_path / "big.png"
    path.write_bytes(png)
    with pytest.raises(FormatError, match=r"40000x40000 image is beyond the largest side"):
        ImageSequenceReader(path)


def test_the_cli_reports_a_damaged_parameter_file_with_exit_2(tmp_path):
    from typer.testing import CliRunner

    from synth.cli import app

    (tmp_path / "c.y4m").write_bytes(b"YUV4MPEG2 W16 H16\n" + (b"FRAME\n" + bytes(384)) * 9)
    params = tmp_path / "p.json"
    params.write_bytes(b'{"format": "synth-params", "schema_version": 1, "params": {"group_size": 8.0}}')
    result = CliRunner().invoke(
        app, ["frame", str(tmp_path / "c.y4m"), "--past", "0", "--future", "8", "--at", "4", "--params", str(params),
              "-o", str(tmp_path / "o.y4m")],
    )  # fmt: skip
    assert result.exit_code == 2, result.output
    assert "group_size must be 1, 2, 4 or 8, got 8.0" in result.output


def test_the_sidecar_an_export_writes_reads_back(tmp_path):
    """read_sidecar accepts what synth.codec.export writes (5 pictures, GOP 4: 3 synthetic)."""
    from synth.codec.export import write_reference_export
    from synth.io import open_clip, write_y4m
    from synth.makers import get_maker
    from synth.picture import Picture

    rng = np.random.default_rng(4)
    c = np.full((8, 8), 128, np.uint8)
    base = rng.integers(0, 256, (16, 24), dtype=np.uint8)
    pics = [Picture(np.ascontiguousarray(base[:, k : k + 16]), c, c, "420", 8) for k in range(5)]
    clip = tmp_path / "c.y4m"
    write_y4m(clip, pics)
    with open_clip(clip) as reader:
        write_reference_export(reader, tmp_path / "r.y4m", gop=4, maker=get_maker("average"))
    doc = read_sidecar(tmp_path / "r.y4m.json", pictures=3, width=16, height=16)
    # dyadic GOP of 4 (common practice): the middle picture first (layer 1), then the quarter points
    assert [(p["time"], p["layer"]) for p in doc["pictures"]] == [(1, 2), (2, 1), (3, 2)]
    with pytest.raises(FormatError, match=r"r\.y4m\.json: the sidecar describes 16x16 pictures, the clip holds 32x16"):
        read_sidecar(tmp_path / "r.y4m.json", width=32)
