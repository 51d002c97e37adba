"""Jobs per second of one study run in-process, on local worker processes and on a Dask cluster.

    .venv/bin/python tests/benchmarks/study_throughput.py [--clips 'demo_clips/*.y4m'] [--kind blend|synthesise]

``--kind blend`` (default): the cheap kind on every clip (all pictures, full size) over gaps 2, 4,
8, 16 and the three blend methods (36 jobs on the demo clips): measures the machinery's overhead.
``--kind synthesise``: the LMMSE synthesiser with estimated vectors over gaps 2, 4, 8 (9 jobs of a
few seconds each): measures useful parallel work. Each executor runs the study from an empty study
folder; the aggregated ``study.json`` must be byte-identical across executors (checked). Times count
from the first job submitted to the last record written, so a local pool's process start-up is
included; Dask runs on a `distributed.LocalCluster` with 2 worker processes whose start-up is
reported separately, once with Dask's default worker environment (``MALLOC_TRIM_THRESHOLD_=65536``)
and once with that variable unset.
"""

from __future__ import annotations

import argparse
import glob
import json
import os
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--clips", default=str(REPO / "demo_clips" / "*.y4m"), help="glob of clips")
    ap.add_argument("--no-dask", action="store_true")
    ap.add_argument("--kind", choices=("blend", "synthesise"), default="blend")
    args = ap.parse_args()
    clips = sorted(glob.glob(args.clips))
    if not clips:
        print(f"no clips match {args.clips}", file=sys.stderr)
        return 2
    from synth.study import DaskExecutor, LocalExecutor, load_manifest, run_study

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        lines = ['title = "throughput"']
        for c in clips:
            lines += ["[[clips]]", f"path = {json.dumps(os.path.abspath(c))}"]
        if args.kind == "blend":
            lines += [
                "[[tasks]]",
                'kind = "blend"',
                'grid = { gap = [2, 4, 8, 16], method = ["linear", "nearest", "past"] }',
            ]
        else:
            lines += ["[[tasks]]", 'kind = "synthesise"', "grid = { gap = [2, 4, 8] }"]
        (tmp / "study.toml").write_text("\n".join(lines) + "\n")
        manifest = load_manifest(tmp / "study.toml")
        results = {}
        for workers in (1, 2):
            out = tmp / f"local{workers}"
            o = run_study(manifest, out, executor=LocalExecutor(workers))
            results[f"local, {workers} worker(s)"] = (o.ran, o.seconds, (out / "study.json").read_bytes())
        if not args.no_dask:
            import dask
            from distributed import LocalCluster

            for trim, label in (("default", "Dask's worker environment"), (None, "MALLOC_TRIM_THRESHOLD_ unset")):
                settings = (
                    {} if trim == "default" else {"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}
                )
                t0 = time.perf_counter()
                with (
                    dask.config.set(settings),
                    LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None) as cluster,
                ):
                    start = time.perf_counter() - t0
                    with DaskExecutor(cluster.scheduler_address) as ex:
                        out = tmp / f"dask-{trim}"
                        o = run_study(manifest, out, executor=ex)
                        results[f"dask LocalCluster, 2 workers, {label} (start-up {start:.1f} s not counted)"] = (
                            o.ran,
                            o.seconds,
                            (out / "study.json").read_bytes(),
                        )
        ref = next(iter(results.values()))[2]
        print(f"kind {args.kind}: {len(clips)} clips, {next(iter(results.values()))[0]} jobs")
        for name, (ran, sec, doc) in results.items():
            print(f"{name:<92} {ran:>4} jobs in {sec:6.2f} s = {ran / sec:7.2f} jobs/s   identical: {doc == ref}")
        if any(doc != ref for _, _, doc in results.values()):
            print("aggregated results differ between executors", file=sys.stderr)
            return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
