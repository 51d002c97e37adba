"""Property-based tests of every reader: malformed input raises the project's own error, nothing else.

For each reader, valid files written by synth's own writers (or, for the clips, by the format's
layout) are mutated by hypothesis: byte flips, truncations, insertions, deletions, and in JSON and
TOML documents value replacements (lists and tables where a number belongs, integers of up to 5000
digits, NaN, infinities, 1e999, strings, booleans, nulls). Structured strategies generate field and
parameter documents from their keys. The property: reading either succeeds or raises a
`synth.errors.SynthError` subclass whose message is one line; any other exception (what the CLI
reports as an internal fault, exit 3) fails the test. The model of "malformed input must be
refused with the tool's own error, never crash" is common practice in parser testing (mutation
fuzzing of file readers).

Examples per reader: `QUICK_EXAMPLES` in ``make test``; ``SYNTH_FUZZ=long`` (``make fuzz``) runs
`LONG_EXAMPLES` and, with ``SYNTH_FUZZ_REPORT=FILE``, writes the per-reader counts (inputs,
accepted, refused) to FILE as JSON.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import tempfile
import zipfile
from collections import Counter
from fractions import Fraction
from pathlib import Path

import cv2
import numpy as np
import pytest
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st

from synth.errors import SynthError

LONG = os.environ.get("SYNTH_FUZZ", "") == "long"
QUICK_EXAMPLES = 200
LONG_EXAMPLES = 5000
#: the video reader opens a decoder per input (about 5 ms each): fewer examples in the quick mode
VIDEO_QUICK_EXAMPLES = 50

settings.register_profile(
    "readers",
    max_examples=LONG_EXAMPLES if LONG else QUICK_EXAMPLES,
    deadline=None,
    derandomize=not LONG,
    database=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.filter_too_much],
)
FUZZ = settings.get_profile("readers")
FUZZ_VIDEO = settings(FUZZ, max_examples=LONG_EXAMPLES if LONG else VIDEO_QUICK_EXAMPLES)

COUNTS: dict[str, Counter] = {}


@pytest.fixture(scope="module", autouse=True)
def _report():
    yield
    shutil.rmtree(SCRATCH, ignore_errors=True)
    target = os.environ.get("SYNTH_FUZZ_REPORT")
    if target:
        rows = {name: dict(c) for name, c in sorted(COUNTS.items())}
        previous = json.loads(Path(target).read_text()) if Path(target).is_file() else {}
        previous.update(rows)
        Path(target).write_text(json.dumps(previous, indent=1) + "\n")


SCRATCH = Path(tempfile.mkdtemp(prefix="synth-fuzz-"))


def _outcome(reader: str, call) -> None:
    """Run `call`; count it as accepted or refused; let any other exception fail the test."""
    c = COUNTS.setdefault(reader, Counter())
    c["inputs"] += 1
    try:
        call()
    except SynthError as exc:
        message = str(exc)
        assert message and "\n" not in message, f"{reader}: the message is not one line: {message!r}"
        c["refused"] += 1
        return
    c["accepted"] += 1


# --- mutations -----------------------------------------------------------------------------------

_OPS = st.lists(
    st.tuples(
        st.sampled_from(["flip", "truncate", "insert", "delete", "duplicate", "set"]),
        st.floats(0, 1, allow_nan=False),
        st.binary(min_size=1, max_size=16),
    ),
    min_size=1,
    max_size=4,
)


def mutate_bytes(data: bytes, ops) -> bytes:
    """Apply byte-level mutations (positions as fractions of the current length)."""
    b = bytearray(data)
    for op, where, payload in ops:
        pos = int(where * len(b)) if b else 0
        pos = min(pos, max(len(b) - 1, 0))
        if op == "flip" and b:
            b[pos] ^= payload[0] or 0x01
        elif op == "truncate":
            del b[pos:]
        elif op == "insert":
            b[pos:pos] = payload
        elif op == "delete":
            del b[pos : pos + len(payload)]
        elif op == "duplicate":
            b[pos:pos] = b[pos : pos + 4 * len(payload)]
        elif op == "set" and b:
            b[pos : pos + len(payload)] = payload
    return bytes(b)


#: Raw JSON tokens that json.dumps cannot produce (or Python's int() refuses to print).
_TOKENS = {
    "@HUGE4301@": "9" * 4301,
    "@HUGE5000@": "-" + "1" * 5000,
    "@HUGE41@": "1" * 41,
    "@BIG400@": "1" + "0" * 400,
    "@NAN@": "NaN",
    "@INF@": "Infinity",
    "@NINF@": "-Infinity",
    "@E999@": "1e999",
    "@DEEP@": "[" * 3000 + "]" * 3000,
}

_SCALARS = st.one_of(
    st.sampled_from(list(_TOKENS)),
    st.integers(-(2**70), 2**70),
    st.sampled_from([0, 1, -1, 2, 4, 8, 16, 2**31, 2**31 - 1, -(2**31) - 1, 2**63, 65536, 16385, 8.0, 0.5, -0.0]),
    st.floats(allow_nan=False, allow_infinity=False),
    st.booleans(),
    st.none(),
    st.text(max_size=12),
    st.text(min_size=300, max_size=301),
)
_VALUES = st.recursive(
    _SCALARS,
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=4), inner, max_size=3),
    max_leaves=6,
)


def _paths(doc, prefix=()):
    """Every path to a value inside a JSON document (the root excluded)."""
    out = []
    if isinstance(doc, dict):
        for k, v in doc.items():
            out.append((*prefix, k))
            out.extend(_paths(v, (*prefix, k)))
    elif isinstance(doc, list):
        for i, v in enumerate(doc[:8]):
            out.append((*prefix, i))
            out.extend(_paths(v, (*prefix, i)))
    return out


def _replace(doc, path, value):
    import copy

    doc = copy.deepcopy(doc)
    node = doc
    for k in path[:-1]:
        node = node[k]
    if value == "@DROP@":
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return doc


def json_text(doc) -> str:
    text = json.dumps(doc)
    for key, token in _TOKENS.items():
        text = text.replace(f'"{key}"', token)
    return text


@st.composite
def mutated_json(draw, seed_doc):
    """A JSON document: the seed with up to three values replaced or dropped, sometimes byte-mutated."""
    doc = seed_doc
    for _ in range(draw(st.integers(1, 3))):
        paths = _paths(doc)
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        value = draw(st.one_of(_VALUES, st.just("@DROP@")))
        doc = _replace(doc, path, value)
    text = json_text(doc).encode("utf-8", "surrogatepass")
    if draw(st.integers(0, 4)) == 0:
        text = mutate_bytes(text, draw(_OPS))
    return text


# --- seeds ---------------------------------------------------------------------------------------


def _field_seed():
    from synth.field import VectorField

    n = 4
    return VectorField(
        32, 32, 8.0, 0.0,
        np.array([0, 16, 0, 16], np.int32), np.array([0, 0, 16, 16], np.int32),
        np.full(n, 16, np.int32), np.full(n, 16, np.int32),
        np.array([4, -8, 0, 12], np.int32), np.array([0, 2, -4, 0], np.int32),
        np.array([False, False, True, False]), False,
    )  # fmt: skip


def _write(name: str, data: bytes) -> Path:
    SCRATCH.mkdir(exist_ok=True)
    p = SCRATCH / name
    p.write_bytes(data)
    return p


@pytest.fixture(scope="module")
def seeds():
    from synth.io import write_fields, write_offsets, write_y4m
    from synth.offset_field import OffsetField
    from synth.picture import Picture
    from synth.synthesis.params import SynthParams

    SCRATCH.mkdir(exist_ok=True)  # a module fixture may be set up again under pytest-xdist
    rng = np.random.default_rng(1)
    out = {}
    field = _field_seed()
    write_fields(SCRATCH / "seed.json", [field, field.__class__(**{**field.__dict__, "coded_time": 4.0})])
    write_fields(SCRATCH / "seed.npz", [field])
    out["fields_json"] = json.loads((SCRATCH / "seed.json").read_text())
    out["fields_npz"] = (SCRATCH / "seed.npz").read_bytes()
    off = OffsetField.from_blocks(
        width=32, height=16, time=4.0, x=[0, 16], y=[0, 0], w=16, h=16, dx=[1, -2], dy=[0, 3], intra=[False, False]
    )
    write_offsets(SCRATCH / "seed_off.json", off, statistics={"blocks": 2})
    out["offsets"] = json.loads((SCRATCH / "seed_off.json").read_text())
    out["params"] = json.loads(SynthParams(candidates=6, reach=40.0).to_json())
    pics = [
        Picture(
            rng.integers(0, 256, (16, 16), dtype=np.uint8),
            rng.integers(0, 256, (8, 8), dtype=np.uint8),
            rng.integers(0, 256, (8, 8), dtype=np.uint8),
            "420",
            8,
        )
        for _ in range(3)
    ]
    write_y4m(SCRATCH / "seed.y4m", pics)
    out["y4m"] = (SCRATCH / "seed.y4m").read_bytes()
    out["yuv"] = b"".join(p.y.tobytes() + p.cb.tobytes() + p.cr.tobytes() for p in pics)
    ok, png8 = cv2.imencode(".png", rng.integers(0, 256, (12, 10, 3), dtype=np.uint8))
    ok16, png16 = cv2.imencode(".png", rng.integers(0, 65536, (8, 6), dtype=np.uint16))
    assert ok and ok16
    out["png"] = [png8.tobytes(), png16.tobytes()]
    out["video"] = _video_seed()
    out["sidecar"] = {
        "format": "synth-reference-sidecar",
        "schema_version": 1,
        "source": "clip.y4m",
        "output": "refs.y4m",
        "container": "y4m",
        "width": 32,
        "height": 32,
        "chroma_format": "420",
        "bit_depth": 8,
        "frame_rate": "25/1",
        "gop": 4,
        "synthesiser": "lmmse",
        "qp": 27,
        "pictures": [
            {"position": 0, "time": 2, "past": 0, "future": 4, "t": 0.5, "layer": 1,
             "fields": [{"coded_time": 4, "reference_time": 0, "blocks": 4, "source": "estimated", "qp": 27}]},
            {"position": 1, "time": 1, "past": 0, "future": 2, "t": 0.5, "layer": 2, "fields": []},
        ],
        "uncovered": [5],
    }  # fmt: skip
    (SCRATCH / "clip.y4m").write_bytes(out["y4m"])
    out["manifest"] = (
        'title = "fuzz"\n'
        "[[clips]]\n"
        'path = "clip.y4m"\n'
        'name = "c"\n'
        "pictures = [0, 2]\n"
        "[[tasks]]\n"
        'kind = "blend"\n'
        'clips = ["c*"]\n'
        "[tasks.grid]\n"
        "gap = [2]\n"
        'method = ["linear", "past"]\n'
        "[[tasks]]\n"
        'kind = "rd"\n'
        "[tasks.fixed]\n"
        "offset_block = 16\n"
        "gap = 2\n"
        "[[tasks]]\n"
        'kind = "gop"\n'
        "[tasks.grid]\n"
        "size = [2, 4]\n"
    )
    return out


def _video_seed() -> bytes:
    """A five-picture 32x32 H.264 clip in MP4 (PyAV's bundled x264)."""
    import av

    path = SCRATCH / "seed.mp4"
    with av.open(str(path), "w") as out:
        stream = out.add_stream("libx264", rate=Fraction(25))
        stream.width, stream.height, stream.pix_fmt = 32, 32, "yuv420p"
        rng = np.random.default_rng(2)
        for _ in range(5):
            frame = av.VideoFrame.from_ndarray(rng.integers(0, 256, (32, 32, 3), dtype=np.uint8), format="rgb24")
            for packet in stream.encode(frame):
                out.mux(packet)
        for packet in stream.encode():
            out.mux(packet)
    return path.read_bytes()


# --- clip readers --------------------------------------------------------------------------------


def _read_all(reader, most: int = 8) -> None:
    with reader:
        for i in range(min(len(reader), most)):
            reader.read(i)


def test_y4m_reader_refuses_mutations_with_its_own_error(seeds):
    from hypothesis import given

    from synth.io import Y4MReader

    @FUZZ
    @given(_OPS)
    def check(ops):
        path = _write("m.y4m", mutate_bytes(seeds["y4m"], ops))
        _outcome("y4m", lambda: _read_all(Y4MReader(path)))

    check()


_HEADERS = st.lists(
    st.sampled_from(
        ["W16", "H16", "W0", "H99999999", "W16385", "H16384", "F25:1", "F0:0", "F1:0", "Ip", "Ix", "A1:1", "C420jpeg",
         "C444p10", "C422", "Cmono16", "C411", "Cfoo", "Xkey=v", "Q", "", "W-4", "W1e3"]
    ),
    max_size=7,
)  # fmt: skip


def test_y4m_reader_refuses_generated_headers(seeds):
    from hypothesis import given

    from synth.io import Y4MReader

    @FUZZ
    @given(_HEADERS, st.binary(max_size=64), st.integers(0, 3))
    def check(tags, body, frames):
        head = ("YUV4MPEG2 " + " ".join(tags)).encode() + b"\n"
        data = head + (b"FRAME\n" + seeds["yuv"][:384] + body[: len(body) % 9 if len(body) > 32 else 0]) * frames
        path = _write("g.y4m", data)
        _outcome("y4m-headers", lambda: _read_all(Y4MReader(path)))

    check()


def test_raw_yuv_reader_refuses_mutations_and_contradictory_geometry(seeds):
    from hypothesis import given

    from synth.io import RawYUVReader

    @FUZZ
    @given(
        _OPS,
        st.one_of(st.none(), st.sampled_from([16, 15, 0, 8, 17, 16384, 16385, 10**6])),
        st.one_of(st.none(), st.sampled_from(["420", "422", "444", "mono", "400", "411", ""])),
        st.one_of(st.none(), st.sampled_from([8, 10, 16, 7, 17])),
    )
    def check(ops, width, chroma, depth):
        path = _write("clip_16x16.yuv", mutate_bytes(seeds["yuv"], ops))
        opts = {"chroma_format": chroma, "bit_depth": depth}
        if width is not None:
            opts.update(width=width, height=16)
        _outcome("raw-yuv", lambda: _read_all(RawYUVReader(path, **{k: v for k, v in opts.items() if v is not None})))

    check()


def test_png_reader_refuses_mutations(seeds):
    from hypothesis import given

    from synth.io import ImageSequenceReader

    @FUZZ
    @given(st.integers(0, 1), _OPS, st.sampled_from(["420", "444", "mono"]))
    def check(which, ops, chroma):
        path = _write("m.png", mutate_bytes(seeds["png"][which], ops))
        _outcome("png", lambda: _read_all(ImageSequenceReader(path, chroma_format=chroma)))

    check()


def test_video_reader_refuses_mutations(seeds):
    from hypothesis import given

    from synth.io import VideoReader

    @FUZZ_VIDEO
    @given(_OPS)
    def check(ops):
        path = _write("m.mp4", mutate_bytes(seeds["video"], ops))
        _outcome("video", lambda: _read_all(VideoReader(path), most=6))

    check()


# --- vector fields -------------------------------------------------------------------------------


def test_field_json_reader_refuses_mutations(seeds):
    from hypothesis import given

    from synth.io import read_fields

    @FUZZ
    @given(mutated_json(seeds["fields_json"]), st.booleans())
    def check(text, sized):
        path = _write("m.json", text)
        size = {"width": 32, "height": 32} if sized else {}
        _outcome("fields-json", lambda: read_fields(path, **size))

    check()


_BLOCK = st.tuples(
    st.integers(-8, 40), st.integers(-8, 40), st.sampled_from([2, 4, 8, 16, 32, 256]), st.sampled_from([4, 8, 16, 3]),
    st.integers(-300, 300), st.integers(-300, 300), st.sampled_from([0, 1, 2, True, False]),
)  # fmt: skip


def test_field_json_reader_refuses_generated_fields():
    from hypothesis import given

    from synth.io import read_fields

    @FUZZ
    @given(
        st.sampled_from([32, 16, 32, 16, 1, 0, 16384, 16385, 65536]),
        st.sampled_from([32, 8, 32, 8, 4, 65536]),
        st.lists(_BLOCK, max_size=12),
        st.booleans(),
        st.sampled_from([8.0, 8, -4, 0.0, -(2**31), 2**40, "@NAN@", "@E999@"]),
        st.booleans(),
    )
    def check(width, height, blocks, gaps, coded, tile):
        if tile and blocks and width in (16, 32) and height in (8, 32):
            # a tiling of the picture in 8x8 blocks (valid unless a vector reaches too far)
            blocks = [(x, y, 8, 8, b[4] % 40, b[5] % 40, b[6] if b[6] != 2 else 0) for (x, y), b in
                      zip([(x, y) for y in range(0, height, 8) for x in range(0, width, 8)], blocks * 64)]  # fmt: skip
        doc = {
            "format": "synth-vector-field", "schema_version": 1, "width": width, "height": height,
            "fields": [{"coded_time": coded, "reference_time": 0.0, "gaps_allowed": gaps,
                        "columns": ["x", "y", "w", "h", "dx", "dy", "intra"], "blocks": [list(b) for b in blocks]}],
        }  # fmt: skip
        path = _write("g.json", json_text(doc).encode())
        _outcome("fields-json-generated", lambda: read_fields(path))

    check()


def _npz_with(arrays: dict) -> bytes:
    import io as stdio

    buf = stdio.BytesIO()
    np.savez_compressed(buf, **arrays)
    return buf.getvalue()


def test_field_npz_reader_refuses_mutations(seeds):
    from hypothesis import given

    from synth.io import read_fields

    with zipfile.ZipFile(SCRATCH / "seed.npz") as z:
        base = {name[:-4]: np.load(z.open(name), allow_pickle=False) for name in z.namelist()}

    _ARRAYS = st.one_of(
        st.just(np.array(65536)), st.just(np.array([1, 2])), st.just(np.array("x")), st.just(np.array(1.5)),
        st.just(np.zeros((0, 7), np.int32)), st.just(np.zeros((3, 6), np.int32)), st.just(np.array(True)),
        st.just(np.full((2, 7), 2**31 - 1, np.int64)), st.just(np.array([np.nan, 0.0])), st.just(np.array(b"x")),
    )  # fmt: skip

    @FUZZ
    @given(st.one_of(st.none(), st.tuples(st.sampled_from(sorted(base)), _ARRAYS)), _OPS, st.integers(0, 2))
    def check(swap, ops, how):
        arrays = dict(base)
        if swap is not None:
            arrays[swap[0]] = swap[1]
        data = _npz_with(arrays)
        if how:  # damaged members: flips in the compressed data, truncations, patched headers
            data = mutate_bytes(data, ops)
        path = _write("m.npz", data)
        _outcome("fields-npz", lambda: read_fields(path, width=32, height=32))

    check()


# --- offsets, parameters, sidecars, manifests ----------------------------------------------------


def test_offsets_reader_refuses_mutations(seeds):
    from hypothesis import given

    from synth.io import read_offsets

    @FUZZ
    @given(mutated_json(seeds["offsets"]), st.booleans())
    def check(text, sized):
        path = _write("m_off.json", text)
        size = {"width": 32, "height": 16} if sized else {}
        _outcome("offsets", lambda: read_offsets(path, **size))

    check()


def test_parameter_reader_refuses_mutations(seeds):
    from hypothesis import given

    from synth.synthesis.params import SynthParams

    @FUZZ
    @given(mutated_json(seeds["params"]))
    def check(text):
        path = _write("m_params.json", text)
        _outcome("params", lambda: SynthParams.load(path))

    check()


def test_parameter_reader_refuses_generated_values():
    from dataclasses import fields

    from hypothesis import given

    from synth.synthesis.params import SynthParams

    names = [f.name for f in fields(SynthParams)]

    plausible = st.one_of(
        st.integers(-2, 40), st.floats(-1, 100), st.sampled_from(["lmmse", "nearest", "sixtap", "distance", "learned"])
    )

    @FUZZ
    @given(st.dictionaries(st.sampled_from(names), st.one_of(_VALUES, plausible, plausible), min_size=1, max_size=4))
    def check(params):
        doc = {"format": "synth-params", "schema_version": 1, "params": params}
        path = _write("g_params.json", json_text(doc).encode("utf-8", "surrogatepass"))
        _outcome("params-generated", lambda: SynthParams.load(path))

    check()


def test_sidecar_reader_refuses_mutations(seeds):
    from hypothesis import given

    from synth.io import read_sidecar

    @FUZZ
    @given(mutated_json(seeds["sidecar"]), st.sampled_from([None, 2, 3]))
    def check(text, pictures):
        path = _write("m.y4m.json", text)
        _outcome("sidecar", lambda: read_sidecar(path, pictures=pictures, width=32, height=32))

    check()


_TOML_CHOICES = st.sampled_from(
    ["1", "0", "-1", "3", "8.0", "1e999", "inf", "nan", "true", '"x"', '"' + "a" * 300 + '"', "[]", "[1, [2]]",
     '["a", 1]', "{}", "{ a = 1 }", "9" * 4400, "1979-05-27T07:32:00Z", '"../clip.y4m"', '"*.y4m"', '"/"',
     "[2, 4, 4]", "[0, 99]", "[3, 2]", "[0, 0, 0, 0]", "[0, 0, 8, 8]", "12", "7", "[1024]"]
)  # fmt: skip
#: values a key of the manifest may get: the choices above, small integers, small integer lists
_TOML_VALUES = st.one_of(
    _TOML_CHOICES, st.integers(-3, 70).map(str), st.lists(st.integers(-3, 70), min_size=1, max_size=3).map(str)
)


def test_manifest_reader_refuses_mutations(seeds):
    from hypothesis import given

    from synth.study import load_manifest

    lines = seeds["manifest"].splitlines()
    values = [i for i, line in enumerate(lines) if " = " in line]

    @FUZZ
    @given(
        st.lists(st.tuples(st.sampled_from(values), _TOML_VALUES), max_size=2),
        st.one_of(st.none(), st.none(), _OPS),
    )
    def check(changes, ops):
        new = list(lines)
        for i, value in changes:
            key = new[i].split(" = ", 1)[0]
            new[i] = f"{key} = {value}"
        data = ("\n".join(new) + "\n").encode()
        if ops is not None:
            data = mutate_bytes(data, ops)
        path = _write("m.toml", data)
        _outcome("manifest", lambda: load_manifest(path))

    check()


def test_message_lines_hold_no_huge_values():
    """A refused 5000-digit value is not echoed whole: messages stay short lines."""
    from synth.io import read_fields

    doc = {"format": "synth-vector-field", "schema_version": "@HUGE5000@", "width": 8, "height": 8, "fields": []}
    path = _write("huge_version.json", json_text(doc).encode())
    with pytest.raises(SynthError, match=r"an integer of 5000 digits \(at most 40 are read\)") as info:
        read_fields(path)
    assert len(str(info.value)) < 300 and re.search(r"huge_version\.json", str(info.value))
