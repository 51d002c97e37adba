"""The job kinds that wrap the synthesiser and the encoder measurement, run through a study.

Outside references: PSNR against scikit-image's `peak_signal_noise_ratio`; the ``rd`` kind's rows
against the library measurement it wraps (`synth.codec.rdmeasure.measure_clip`, itself checked against
x264 and the `bjontegaard` package in its own tests).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from study_support import study_clip_files

from synth.errors import ParameterError
from synth.io import open_clip
from synth.study import get_kind, load_manifest, run_study
from synth.study.clipsource import ClipView


@pytest.fixture(scope="module")
def clip(tmp_path_factory) -> Path:
    return study_clip_files(tmp_path_factory.mktemp("clips"))[0]


def test_synthesise_kind_rows_match_the_synthesiser(clip, tmp_path):
    if get_kind("synthesise").unavailable_reason():
        pytest.skip(get_kind("synthesise").unavailable_reason())
    from skimage.metrics import peak_signal_noise_ratio

    from synth import estimate_field, synthesise

    (tmp_path / "s.toml").write_text(
        f'[[clips]]\npath = "{clip}"\npictures = [0, 2]\nwindow = [32, 16, 96, 64]\n'
        '[[tasks]]\nkind = "synthesise"\ngrid = { stripe_rows = [0, 16] }\n'
    )
    run_study(load_manifest(tmp_path / "s.toml"), tmp_path / "out")
    doc = json.loads((tmp_path / "out" / "study.json").read_text())
    whole, striped = ([r for r in doc["rows"] if r["stripe_rows"] == s] for s in (0, 16))
    assert len(whole) == 1 and [dict(r, stripe_rows=0, job="") for r in striped] == [dict(r, job="") for r in whole]
    view = ClipView(open_clip(clip), pictures=[0, 2], window=[32, 16, 96, 64])
    past, truth, future = view.read(0), view.read(1), view.read(2)
    field = estimate_field(future, past, coded_time=2, reference_time=0, qp=27)
    pred = synthesise(past, future, [field], t=0.5)
    assert whole[0]["psnr_y"] == pytest.approx(peak_signal_noise_ratio(truth.y, pred.y, data_range=255), abs=1e-9)


def test_rd_kind_passes_the_measurement_through(clip, tmp_path):
    if get_kind("rd").unavailable_reason():
        pytest.skip(get_kind("rd").unavailable_reason())
    from synth.codec.rdmeasure import measure_clip
    from synth.makers import resolve_makers

    (tmp_path / "s.toml").write_text(
        f'[[clips]]\npath = "{clip}"\nname = "dock"\npictures = [0, 2]\nwindow = [0, 0, 64, 48]\n'
        '[[tasks]]\nkind = "rd"\nfixed = { gap = 2, makers = "average", preset = "ultrafast", limit = 1 }\n'
    )
    outcome = run_study(load_manifest(tmp_path / "s.toml"), tmp_path / "out")
    assert not outcome.failed
    doc = json.loads((tmp_path / "out" / "study.json").read_text())
    view = ClipView(open_clip(clip), pictures=[0, 2], window=[0, 0, 64, 48])
    direct = measure_clip(
        view.read,
        len(view),
        clip="x",
        gap=2,
        qps=[22, 27, 32, 37],
        makers=resolve_makers("average"),
        preset="ultrafast",
        limit=1,
        target_picture="B",  # the kind's default, as synth rd's
    )
    bd = direct.bd()
    assert {r["config"] for r in direct.rows} == {"real", "real+average"}
    assert len(doc["rows"]) == len(direct.rows) > 0
    for got, want in zip(doc["rows"], direct.rows):
        assert (got["config"], got["qp"], got["bits"], got["psnr_y"]) == (
            want["config"],
            want["qp"],
            want["bits"],
            want["psnr_y"],
        )
        if want["config"] != "real":
            assert got["bd_rate"] == pytest.approx(bd[want["config"]]["bd_rate"], abs=1e-12)
    # The tables split by configuration and QP: one mean per (config, qp).
    assert {(m["config"], m["qp"]) for m in doc["means"]} == {(r["config"], r["qp"]) for r in direct.rows}


def test_synthesise_kind_takes_a_maker_and_a_field_file(clip, tmp_path):
    from synth import estimate_field
    from synth.io import write_fields
    from synth.makers import get_maker

    view = ClipView(open_clip(clip), pictures=[0, 2], window=[32, 16, 96, 64])
    past, truth, future = view.read(0), view.read(1), view.read(2)
    field = estimate_field(future, past, coded_time=2, reference_time=0, qp=33)
    write_fields(tmp_path / "f.json", [field])
    (tmp_path / "s.toml").write_text(
        f'[[clips]]\npath = "{clip}"\npictures = [0, 2]\nwindow = [32, 16, 96, 64]\n'
        f'[[tasks]]\nkind = "synthesise"\nfixed = {{ maker = "projection", vectors = "{tmp_path / "f.json"}" }}\n'
        '[[tasks]]\nkind = "synthesise"\nfixed = { maker = "projection", vector_qp = 33, stripe_rows = 16 }\n'
    )
    run_study(load_manifest(tmp_path / "s.toml"), tmp_path / "out")
    doc = json.loads((tmp_path / "out" / "study.json").read_text())
    from_file, striped = doc["rows"]
    # PSNR as 10 log10(255^2 / MSE) (common practice) of the registry's maker on the same field
    pred = get_maker("projection")(past, future, t=0.5, fields=[field]).picture
    mse = float(np.mean((pred.y.astype(float) - truth.y.astype(float)) ** 2))
    assert from_file["psnr_y"] == pytest.approx(10 * np.log10(255**2 / mse), abs=1e-9)
    assert striped["psnr_y"] == from_file["psnr_y"]  # stripes are bit-identical, estimate = file field
    (tmp_path / "bad.toml").write_text(
        f'[[clips]]\npath = "{clip}"\n[[tasks]]\nkind = "synthesise"\nfixed = {{ maker = "blend" }}\n'
    )
    with pytest.raises(ParameterError, match="maker"):
        load_manifest(tmp_path / "bad.toml")


@pytest.mark.parametrize(
    "kind, fixed, call",
    [
        ("compare", 'gap = 2, makers = "average,lmmse"', dict(gap=2, makers="average,lmmse")),
        ("gop", 'size = 2, makers = "average,obmc"', dict(size=2, makers="average,obmc")),
    ],
)
def test_workbench_kinds_pass_the_rows_through(clip, tmp_path, kind, fixed, call):
    if get_kind(kind).unavailable_reason():
        pytest.skip(get_kind(kind).unavailable_reason())
    import importlib

    from synth.io import write_y4m

    (tmp_path / "s.toml").write_text(
        f'[[clips]]\npath = "{clip}"\nname = "dock"\npictures = [0, 2]\nwindow = [0, 0, 64, 48]\n'
        f'[[tasks]]\nkind = "{kind}"\nfixed = {{ {fixed} }}\n'
    )
    outcome = run_study(load_manifest(tmp_path / "s.toml"), tmp_path / "out")
    assert not outcome.failed, outcome.failed
    doc = json.loads((tmp_path / "out" / "study.json").read_text())
    view = ClipView(open_clip(clip), pictures=[0, 2], window=[0, 0, 64, 48])
    write_y4m(tmp_path / "same.y4m", iter(view), view.info)
    direct = getattr(importlib.import_module(f"synth.evaluation.{kind}"), kind)(tmp_path / "same.y4m", **call).to_rows()
    drop = ("seconds", "job", "kind", "clip", "pictures", "window", *call)  # timings differ run to run
    assert [{k: v for k, v in r.items() if k not in drop} for r in doc["rows"]] == [
        {k: v for k, v in r.items() if k not in drop} for r in direct
    ]
    assert {m["method"] for m in doc["means"]} == {r["method"] for r in direct}
