"""The ``--vectors`` sources backed by coded vectors (`synth.motion.sources`): ``x264`` and
``stream``, through the library and through `synth vectors`.

Outside references: scikit-image's camera photograph under an exact Fourier-shift translation
(see tests/test_io_coded_vectors.py), coded by PyAV's bundled x264; the expected vector of a block
on picture n against picture m is 4 (m - n) v quarter samples (project sign, synth/field.py).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

av = pytest.importorskip("av")
pytest.importorskip("skimage.data")

from test_io_coded_vectors import H, W, translated_photograph  # noqa: E402

from synth.cli import app  # noqa: E402
from synth.codec import hierarchy_coding  # noqa: E402
from synth.errors import ParameterError  # noqa: E402
from synth.field_checks import validate_field  # noqa: E402
from synth.io import read_fields, write_y4m  # noqa: E402
from synth.motion.sources import parse_vector_source  # noqa: E402

V = (1.25, -0.75)


@pytest.fixture(scope="module")
def pan(tmp_path_factory):
    """19 pictures of the translated photograph as .y4m, and the first 9 coded by x264 as .h264
    (GOP 4) and .mp4 (GOP 8, H.264 in MPEG-4 Part 14)."""
    folder = tmp_path_factory.mktemp("pan")
    pictures = translated_photograph(V, 19)
    clip = folder / "pan.y4m"
    write_y4m(clip, pictures)
    h264 = folder / "pan.h264"
    h264.write_bytes(hierarchy_coding.code_x264_hierarchy(pictures[:9], qp=24, gop=4))
    mp4 = folder / "pan.mp4"
    with av.open(str(mp4), "w") as dst:
        st = dst.add_stream("libx264", rate=25)
        st.width, st.height, st.pix_fmt = W, H, "yuv420p"
        st.codec_context.options = {"x264-params": hierarchy_coding.x264_params(7, 24), "threads": "1"}
        for k, p in enumerate(pictures[:9]):
            frame = av.VideoFrame.from_ndarray(
                np.concatenate([p.y, p.cb.reshape(-1, W), p.cr.reshape(-1, W)]), format="yuv420p"
            )
            frame.pts = k
            dst.mux(st.encode(frame))
        dst.mux(st.encode(None))
    return {"pictures": pictures, "clip": clip, "h264": h264, "mp4": mp4}


def median_vector(field):
    inter = ~field.intra
    return float(np.median(field.dx[inter])), float(np.median(field.dy[inter]))


def test_x264_pair_mode_codes_the_pair_once_and_gives_the_translation(pan):
    hierarchy_coding.clear_cache()
    pics = pan["pictures"]
    source = parse_vector_source("x264", qp=24, clip=pan["clip"])
    assert source.kind == "x264" and source.qp_matters
    (f,) = source.fields_for(pics[2], pics[6], past_time=2, future_time=6)
    assert (f.coded_time, f.reference_time) == (6.0, 2.0)  # the P picture at the future reference
    validate_field(f)
    assert median_vector(f) == (-4 * 4 * V[0], -4 * 4 * V[1])
    again = source.fields_for(pics[2], pics[6], past_time=2, future_time=6)
    assert again[0] is f  # the encode is cached per clip, QP and structure
    other = source.with_qp(40).fields_for(pics[2], pics[6], past_time=2, future_time=6)[0]
    assert other is not f and source.with_qp(40).describe() == {
        "vectors": "x264", "vector_qp": 40, "structure": "one hierarchy per reference pair",
    }  # fmt: skip


def test_x264_pair_beyond_sixteen_b_pictures_codes_the_two_references_only(pan):
    # x264's X264_BFRAME_MAX is 16 (x264 common/base.h): a gap of 18 codes pictures 0 and 18 alone
    pics = pan["pictures"]
    source = parse_vector_source("x264", qp=24, clip=pan["clip"])
    (f,) = source.fields_for(pics[0], pics[18], past_time=0, future_time=18)
    assert (f.coded_time, f.reference_time) == (18.0, 0.0)
    assert median_vector(f) == (-4 * 18 * V[0], -4 * 18 * V[1])


def test_x264_clip_wide_hierarchy_gives_every_dyadic_pair_and_refuses_others(pan):
    pics = pan["pictures"]
    source = parse_vector_source("x264", qp=24, clip=pan["clip"]).with_hierarchy(8)
    assert source.describe()["structure"] == "clip-wide GOP 8"
    both = source.fields_for(pics[4], pics[8], past_time=4, future_time=8)
    assert [(f.coded_time, f.reference_time) for f in both] == [(4.0, 8.0)]  # B4 list 1 (x264 B-ref)
    (f,) = source.fields_for(pics[2], pics[4], past_time=2, future_time=4)
    assert (f.coded_time, f.reference_time) == (2.0, 4.0)
    with pytest.raises(
        ParameterError,
        match=r"--vectors x264: no field is coded between pictures 1 and 3 \(x264 at QP 24 \(GOP 8\) holds 1->0, 1->4",
    ):
        source.fields_for(pics[1], pics[3], past_time=1, future_time=3)
    with pytest.raises(ParameterError, match="--gop-size 16 is too large"):
        source.with_hierarchy(16)
    assert parse_vector_source(None).with_hierarchy(16).kind == "estimate"  # other sources ignore it


def test_stream_source_reads_the_clip_and_says_its_assumption(pan):
    pics = pan["pictures"]
    source = parse_vector_source("stream", clip=pan["h264"])
    got = source.fields_for(pics[2], pics[4], past_time=2, future_time=4)
    assert [(f.coded_time, f.reference_time) for f in got] == [(2.0, 4.0)]
    got = source.fields_for(pics[0], pics[2], past_time=0, future_time=2)
    assert [(f.coded_time, f.reference_time) for f in got] == [(2.0, 0.0)]
    assert median_vector(got[0]) == (-4 * 2 * V[0], -4 * 2 * V[1])
    record = source.describe()
    assert record["vectors"] == "stream" and record["reference_assumption"].startswith("reference pictures assumed")
    assert not source.qp_matters
    with pytest.raises(ParameterError, match=r"--vectors stream: no field is coded between pictures 0 and 3"):
        source.fields_for(pics[0], pics[3], past_time=0, future_time=3)


def test_stream_source_refuses_a_clip_that_is_not_a_coded_stream(pan):
    with pytest.raises(
        ParameterError,
        match=r"--vectors stream needs an H.264, MPEG-4 Part 2 or MPEG-2 stream as the clip; .*pan\.y4m is 'rawvideo'",
    ):
        parse_vector_source("stream", clip=pan["clip"])
    with pytest.raises(ParameterError, match=r"--vectors must be 'estimate', 'x264', 'stream' or a vector-field file"):
        parse_vector_source("x265")
    lazy = parse_vector_source("x264")  # validators parse without a clip; fields need one
    with pytest.raises(ParameterError, match="--vectors x264 needs the input clip"):
        lazy.fields_for(pan["pictures"][0], pan["pictures"][2], past_time=0, future_time=2)


@pytest.mark.parametrize("vectors,clip_key", [("x264", "clip"), ("stream", "mp4"), ("stream", "h264")])
def test_cli_vectors_writes_a_valid_field_file_from_coded_vectors(pan, tmp_path, vectors, clip_key):
    out = tmp_path / "f.json"
    res = CliRunner().invoke(
        app, ["vectors", str(pan[clip_key]), "--coded", "4", "--ref", "0", "--vectors", vectors, "--vector-qp", "24",
              "-o", str(out), "--json"],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    summary = json.loads(res.output)
    assert summary["vectors"] == vectors
    assert (summary["reference_assumption"] is None) == (vectors == "x264")
    (f,) = read_fields(out, width=W, height=H)
    assert (f.coded_time, f.reference_time) == (4.0, 0.0)
    assert median_vector(f) == (-4 * 4 * V[0], -4 * 4 * V[1])


def test_cli_vectors_bad_source_is_one_line(pan, tmp_path):
    out = tmp_path / "f.json"
    res = CliRunner().invoke(
        app, ["vectors", str(pan["clip"]), "--coded", "4", "--ref", "0", "--vectors", "hevc", "-o", str(out)]
    )
    assert res.exit_code == 2 and res.output.count("\n") == 1 and "Traceback" not in res.output
    assert "--vectors must be 'estimate', 'x264', 'stream'" in res.output and not out.exists()
    res = CliRunner().invoke(
        app, ["vectors", str(pan["clip"]), "--coded", "0", "--ref", "4", "--vectors", "x264", "-o", str(out)]
    )
    assert res.exit_code == 2 and "no field coded at picture 0 against picture 4" in res.output and not out.exists()


def test_vector_qp_sweep_reports_intra_share_and_vector_length(pan):
    """The workbench's vector-QP table with x264 vectors: per QP the intra share and mean vector
    length over the reference pairs, as `synth.motion.summary.summarize_field` measures them."""
    from synth.evaluation.compare import compare_clip
    from synth.evaluation.tables import run_tables
    from synth.evaluation.workbench import run_document
    from synth.motion.summary import summarize_field

    pics = pan["pictures"][:9]
    source = parse_vector_source("x264", clip=pan["clip"]).with_hierarchy(4)
    res = compare_clip(pics, gaps=[4], makers="projection", vector_qps="22,42", vectors=source, clip_name="pan")
    stats = {r["vector_qp"]: r for r in run_document(res)["vector_statistics"]}
    for qp in (22, 42):
        pairs = [source.with_qp(qp).fields_for(pics[a], pics[a + 4], past_time=a, future_time=a + 4) for a in (0, 4)]
        summaries = [summarize_field(f) for fl in pairs for f in fl]
        assert stats[qp]["pairs"] == 2
        assert stats[qp]["intra_share"] == pytest.approx(np.mean([s["intra_share"] for s in summaries]))
        assert stats[qp]["mean_vector_length"] == pytest.approx(np.mean([s["mean_vector_length"] for s in summaries]))
    # the pan is 4 x |v| = 5.83 samples per 4 pictures: P-picture vectors have about that length
    assert stats[22]["mean_vector_length"] == pytest.approx(4 * np.hypot(*V), abs=0.3)
    text = run_tables(res)
    assert "vectors: coded by x264 at QP 22, 42 (clip-wide GOP 4)" in text and "intra %" in text and "mean |v|" in text


def test_study_kind_synthesises_from_x264_vectors_of_its_pictures(pan):
    """The ``synthesise`` kind codes the job's own pictures (clip options applied): with a picture
    window the numbers are the window's, and the vectors still give the translation."""
    from synth.study.builtin_kinds import _job_vector_source, synthesise_rows

    rows = synthesise_rows(pan["clip"], {"gap": 4, "vectors": "x264", "vector_qp": 24, "pictures": [2, 10]})
    assert [(r["past"], r["future"], r["target"]) for r in rows[:3]] == [(0, 4, 1), (0, 4, 2), (0, 4, 3)]
    assert len(rows) == 6 and min(r["psnr_y"] for r in rows) > 30  # an exact pan: good pictures
    source = _job_vector_source(pan["clip"], {"vectors": "x264", "pictures": [2, 10]}, qp=24, gop=4)
    (f,) = source.fields_for(pan["pictures"][2], pan["pictures"][6], past_time=0, future_time=4)
    assert median_vector(f) == (-4 * 4 * V[0], -4 * 4 * V[1])
    with pytest.raises(ParameterError, match="vectors: 'stream' reads the clip file as it is"):
        synthesise_rows(pan["h264"], {"gap": 4, "vectors": "stream", "pictures": [2, 8]})
