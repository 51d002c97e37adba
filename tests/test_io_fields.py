"""Vector-field files: JSON/npz round trips, CSV export and every malformed-file rule.

The rules come from the project's own format definition (io/fields.py, synth/field_checks.py);
block sizes follow the power-of-two partitions of ITU-T H.264/H.265 (common practice).
"""

import csv
import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from synth import FormatError, ParameterError, VectorField
from synth.field_checks import validate_field
from synth.io import fields_to_csv, read_fields, write_fields


def _same(a: VectorField, b: VectorField) -> bool:
    return (
        (a.width, a.height, a.coded_time, a.reference_time, a.gaps_allowed)
        == (b.width, b.height, b.coded_time, b.reference_time, b.gaps_allowed)
        and all(np.array_equal(getattr(a, k), getattr(b, k)) for k in ("x", "y", "w", "h", "dx", "dy", "intra"))
        and all(getattr(a, k).dtype == getattr(b, k).dtype for k in ("x", "y", "w", "h", "dx", "dy", "intra"))
    )


def _small_field(**kw) -> VectorField:
    # a 32x16 picture: one 16x16 block, then four 8x8 blocks in z-order
    args = dict(
        width=32, height=16, coded_time=4, reference_time=0,
        x=[0, 16, 24, 16, 24], y=[0, 0, 0, 8, 8], w=[16, 8, 8, 8, 8], h=[16, 8, 8, 8, 8],
        dx=[5, -3, 0, 12, 0], dy=[-2, 7, 0, 1, 0], intra=[0, 0, 1, 0, 0],
    )  # fmt: skip
    args.update(kw)
    return VectorField.from_arrays(**args)


def _doc(field=None) -> dict:
    f = field or _small_field()
    rows = np.stack([f.x, f.y, f.w, f.h, f.dx, f.dy, f.intra.astype(int)], axis=1).tolist()
    return {
        "format": "synth-vector-field", "schema_version": 1, "width": f.width, "height": f.height,
        "fields": [{"coded_time": f.coded_time, "reference_time": f.reference_time, "gaps_allowed": f.gaps_allowed,
                    "columns": ["x", "y", "w", "h", "dx", "dy", "intra"], "blocks": rows}],
    }  # fmt: skip


def _write_doc(tmp_path, doc, name="f.json"):
    p = tmp_path / name
    p.write_text(json.dumps(doc))
    return p


@pytest.mark.parametrize("suffix", [".json", ".npz"])
def test_round_trip_is_identical(tmp_path, suffix):
    a = _small_field()
    b = _small_field(coded_time=4, reference_time=8.5, dx=[1, 2, 3, 4, 5], gaps_allowed=True)
    write_fields(tmp_path / f"f{suffix}", [a, b])
    back = read_fields(tmp_path / f"f{suffix}", width=32, height=16)
    assert len(back) == 2 and _same(back[0], a) and _same(back[1], b)


def test_json_is_readable_and_versioned(tmp_path):
    write_fields(tmp_path / "f.json", _small_field())
    doc = json.loads((tmp_path / "f.json").read_text())
    assert doc["schema_version"] == 1 and doc["format"] == "synth-vector-field"
    assert doc["fields"][0]["blocks"][0] == [0, 0, 16, 16, 5, -2, 0]


def test_csv_export(tmp_path):
    write_fields(tmp_path / "unused.npz", _small_field())
    fields_to_csv(tmp_path / "f.csv", [_small_field(), _small_field(reference_time=8)])
    rows = list(csv.DictReader((tmp_path / "f.csv").open()))
    assert len(rows) == 10
    assert rows[3]["dx"] == "12" and float(rows[3]["dx_samples"]) == 3.0 and rows[5]["field"] == "1"


# -- malformed files: one case per rule, each with its message ----------------------------------


def _mutate_block(i, j, value):
    doc = _doc()
    doc["fields"][0]["blocks"][i][j] = value
    return doc


MALFORMED = [
    # (case, document, expected message fragment)
    ("outside", _mutate_block(4, 0, 28), r"block 4 \(x=28, y=8, 8x8\): block lies outside the 32x16 picture"),
    ("overlap", _mutate_block(3, 0, 20), r"block 4 \(x=24, y=8, 8x8\): block overlaps block 3 \(x=20, y=8, 8x8\)"),
    ("size 12", _mutate_block(1, 2, 12), r"block 1 .*block width must be a power of two from 4 to 128, got 12"),
    ("size 2", _mutate_block(1, 3, 2), r"block height must be a power of two from 4 to 128, got 2"),
    ("size 256", _mutate_block(0, 2, 256), r"block width must be a power of two from 4 to 128, got 256"),
    ("fractional vector", _mutate_block(1, 4, 1.5), r"block 1 \(x=16, y=0\): dx must be an integer, got 1.5"),
    ("NaN vector", _mutate_block(3, 5, float("nan")), r"block 3 \(x=16, y=8\): dy must be a finite integer, got nan"),
    ("text vector", _mutate_block(0, 4, "7"), r"block 0 \(x=0, y=0\): dx must be an integer, got '7'"),
    (
        "far vector",
        _mutate_block(1, 4, 4 * 17 + 1),
        r"block 1 \(x=16, y=0, 8x8\): vector \(dx=69, dy=7\) .*further than",
    ),
    ("far up", _mutate_block(0, 5, -4 * 16 - 1), r"block 0 .*vector \(dx=5, dy=-65\) quarter samples points further"),
]


def _gap_doc():
    doc = _doc()
    doc["fields"][0]["blocks"].pop(2)  # leaves an 8x8 hole at (24, 0)
    return doc


@pytest.mark.parametrize("case,doc,message", MALFORMED, ids=[m[0] for m in MALFORMED])
def test_malformed_block_is_named(tmp_path, case, doc, message):
    with pytest.raises(FormatError, match=message):
        read_fields(_write_doc(tmp_path, doc))


def test_gap_is_refused_unless_flagged(tmp_path):
    with pytest.raises(FormatError, match=r"field 0: sample \(x=24, y=0\) is covered by no block"):
        read_fields(_write_doc(tmp_path, _gap_doc()))
    doc = _gap_doc()
    doc["fields"][0]["gaps_allowed"] = True
    assert len(read_fields(_write_doc(tmp_path, doc))[0]) == 4


def test_unknown_schema_version(tmp_path):
    doc = _doc() | {"schema_version": 7}
    with pytest.raises(FormatError, match=r"unknown schema version 7 \(this synth reads version 1\)"):
        read_fields(_write_doc(tmp_path, doc))


def test_picture_size_must_match_the_clip(tmp_path):
    p = _write_doc(tmp_path, _doc())
    with pytest.raises(FormatError, match=r"picture size 32x16 does not match the clip's 352x288"):
        read_fields(p, width=352, height=288)


def test_equal_times_and_missing_keys(tmp_path):
    doc = _doc()
    doc["fields"][0]["reference_time"] = 4
    with pytest.raises(FormatError, match="coded_time and reference_time must differ"):
        read_fields(_write_doc(tmp_path, doc))
    doc = _doc()
    del doc["fields"][0]["blocks"]
    with pytest.raises(FormatError, match="field 0: missing key 'blocks'"):
        read_fields(_write_doc(tmp_path, doc))


def test_truncated_and_foreign_files(tmp_path):
    write_fields(tmp_path / "f.json", _small_field())
    text = (tmp_path / "f.json").read_text()
    (tmp_path / "cut.json").write_text(text[: len(text) // 2])
    with pytest.raises(FormatError, match="not valid JSON"):
        read_fields(tmp_path / "cut.json")
    write_fields(tmp_path / "f.npz", _small_field())
    raw = (tmp_path / "f.npz").read_bytes()
    (tmp_path / "cut.npz").write_bytes(raw[: len(raw) // 2])
    with pytest.raises(FormatError, match="not a readable .npz archive"):
        read_fields(tmp_path / "cut.npz")
    with pytest.raises(FormatError, match="end in .json or .npz"):
        read_fields(tmp_path / "f.txt")
    with pytest.raises(FormatError, match="no such file"):
        read_fields(tmp_path / "missing.json")


def test_npz_with_floating_point_vectors_is_rejected(tmp_path):
    write_fields(tmp_path / "f.npz", _small_field())
    with np.load(tmp_path / "f.npz") as z:
        data = dict(z)
    data["field0_blocks"] = data["field0_blocks"].astype(np.float64)
    data["field0_blocks"][2, 4] = 0.25
    np.savez(tmp_path / "g.npz", **data)
    with pytest.raises(FormatError, match=r"field 0, block 2 \(x=24, y=0\): dx must be an integer, got 0.25"):
        read_fields(tmp_path / "g.npz")
    data["field0_blocks"][2, 4] = 0.0
    np.savez(tmp_path / "g.npz", **data)
    with pytest.raises(FormatError, match=r"field 0: column x is stored as floating point \(float64\)"):
        read_fields(tmp_path / "g.npz")


def test_writer_refuses_mixed_sizes_and_leaves_no_file(tmp_path):
    other = _small_field(width=64, height=16)
    with pytest.raises(ParameterError, match="one file holds one picture size"):
        write_fields(tmp_path / "f.json", [_small_field(), other])
    assert list(tmp_path.iterdir()) == []
    bad = _small_field(w=[16, 8, 8, 8, 12])
    with pytest.raises(ParameterError, match=r"fields\[0\], block 4 .*power of two"):
        write_fields(tmp_path / "f.npz", bad)
    assert list(tmp_path.iterdir()) == []


# -- hypothesis: random quadtree fields round-trip ----------------------------------------------


@st.composite
def quadtree_fields(draw):
    top = draw(st.sampled_from([8, 16, 32]))
    cols, rows = draw(st.integers(1, 3)), draw(st.integers(1, 3))
    width, height = cols * top, rows * top
    blocks = []

    def split(x, y, s):
        if s > 4 and draw(st.booleans()):
            h = s // 2
            for dy in (0, h):
                for dx in (0, h):
                    split(x + dx, y + dy, h)
        else:
            blocks.append((x, y, s))

    for r in range(rows):
        for c in range(cols):
            split(c * top, r * top, top)
    n = len(blocks)
    x, y, s = (np.array(v) for v in zip(*blocks))
    dx = draw(st.lists(st.integers(-4 * width, 4 * width), min_size=n, max_size=n))
    dy = draw(st.lists(st.integers(-4 * height, 4 * height), min_size=n, max_size=n))
    # keep vectors within the rule: displaced corner in [-w, W] x [-h, H]
    dx = np.clip(dx, -4 * (x + s), 4 * (width - x))
    dy = np.clip(dy, -4 * (y + s), 4 * (height - y))
    intra = draw(st.lists(st.booleans(), min_size=n, max_size=n))
    times = draw(st.tuples(st.floats(-1e6, 1e6), st.floats(-1e6, 1e6)).filter(lambda t: t[0] != t[1]))
    return VectorField.from_arrays(
        width=width, height=height, coded_time=times[0], reference_time=times[1],
        x=x, y=y, w=s, h=s, dx=np.where(intra, 0, dx), dy=np.where(intra, 0, dy), intra=intra,
    )  # fmt: skip


@settings(max_examples=40, deadline=None)
@given(quadtree_fields())
def test_generated_fields_round_trip(tmp_path_factory, field):
    validate_field(field)
    d = tmp_path_factory.mktemp("rt")
    for suffix in (".json", ".npz"):
        write_fields(d / f"f{suffix}", field)
        (back,) = read_fields(d / f"f{suffix}")
        assert _same(back, field)


def test_a_field_for_another_size_is_refused_before_its_blocks_are_checked(tmp_path):
    """A 300-byte file declaring a 65536 x 65536 picture with gaps allowed, read for a 352 x 288
    clip: refused on the size alone, before a coverage map of the declared picture (4 GiB of
    flags) is built: the reading allocates next to nothing."""
    import tracemalloc

    doc = {
        "format": "synth-vector-field",
        "schema_version": 1,
        "width": 65536,
        "height": 65536,
        "vector_unit": "quarter-sample",
        "fields": [
            {"coded_time": 8.0, "reference_time": 0.0, "gaps_allowed": True,
             "columns": ["x", "y", "w", "h", "dx", "dy", "intra"], "blocks": [[0, 0, 16, 16, 0, 0, 0]]}
        ],
    }  # fmt: skip
    path = tmp_path / "huge.json"
    path.write_text(json.dumps(doc))
    tracemalloc.start()
    try:
        with pytest.raises(FormatError, match="65536x65536 does not match the clip's 352x288"):
            read_fields(path, width=352, height=288)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 16 * 1024 * 1024
