"""Start-up cost of the command line, measured as whole processes against peers of the same run.

    .venv/bin/python tests/benchmarks/startup.py [--runs 7] [--size 1920x1080] [--json PATH]

Two ratios, each the median wall time of N whole processes (``subprocess``, one after the other,
the two commands of a ratio interleaved so drifts of the machine hit both alike) over the median
of its peer measured in the same run:

* ``synth --help`` against ``python -c "import numpy, cv2, typer"`` (the libraries every command
  needs); target at most 2x;
* ``synth frame CLIP --past 0 --future 1 --t 0.5 --vectors FIELD -o OUT.y4m`` on a generated
  two-picture 4:2:0 Y4M (scikit-image's "astronaut" photograph scaled to the size, the second
  picture moved 8 samples right and 3 down) with a field file of the estimated vectors
  (`synth.motion.estimator.estimate_reference_fields`, written once beforehand, not timed)
  against ``dis_interpolate.py``, a whole-process DIS-medium interpolation of the same pair with
  synth's ``dis-medium`` maker reading and writing Y4M; target at most 1.0x.

The frame command takes ``--vectors FIELD``; older builds spelled it ``--field`` (the script asks
``synth frame --help`` which it has). It also records ``python -X importtime`` of ``import
synth.cli`` and of the frame command: the slowest modules by cumulative import time and which
heavy libraries (cv2, scipy, av, matplotlib, ...) ``--help`` loads. Results go to
``tests/benchmarks/results/startup.json``. The script asserts nothing.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results" / "startup.json"
#: Libraries whose import a command that does not use them should not pay for.
HEAVY = ("cv2", "scipy", "av", "matplotlib", "skimage", "PIL", "dask", "distributed", "numba", "rich")
HELP_LIMIT = 2.0
FRAME_LIMIT = 1.0


def _synth_command() -> list[str]:
    script = Path(sys.executable).parent / "synth"
    if script.exists():
        return [str(script)]
    return [sys.executable, "-c", "from synth.cli import main; main()"]


def _make_inputs(folder: Path, width: int, height: int) -> tuple[Path, Path]:
    """The two-picture clip and its field file (made in this process, not timed)."""
    import cv2
    import numpy as np
    from skimage import data

    from synth.io import rgb_to_ycbcr420, write_fields, write_y4m
    from synth.motion.estimator import estimate_reference_fields

    rgb = data.astronaut()
    big = cv2.resize(rgb[..., ::-1], (width, height), interpolation=cv2.INTER_CUBIC)
    shift = np.float32([[1, 0, 8], [0, 1, 3]])
    moved = cv2.warpAffine(big, shift, (width, height), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    past, future = rgb_to_ycbcr420(big), rgb_to_ycbcr420(moved)
    clip = folder / "pair.y4m"
    write_y4m(clip, [past, future])
    field = folder / "field.npz"
    write_fields(field, estimate_reference_fields(past, future, past_time=0.0, future_time=1.0))
    return clip, field


def _vectors_option(synth: list[str]) -> str:
    """``--vectors`` when ``synth frame --help`` lists it, else the older ``--field``."""
    out = subprocess.run([*synth, "frame", "--help"], capture_output=True, text=True, env=_env()).stdout
    return "--vectors" if "--vectors" in out else "--field"


def _env() -> dict:
    env = dict(os.environ)
    env.setdefault("COLUMNS", "100")
    return env


def _wall(cmd: list[str]) -> float:
    start = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, env=_env())
    seconds = time.perf_counter() - start
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed ({proc.returncode}):\n{proc.stderr[-2000:]}")
    return seconds


def _ratio(name: str, cmd: list[str], peer: list[str], runs: int, limit: float, log) -> dict:
    ours, theirs = [], []
    try:
        _wall(cmd), _wall(peer)  # warm the file cache and byte-code
        for _ in range(runs):
            ours.append(_wall(cmd))
            theirs.append(_wall(peer))
    except RuntimeError as exc:  # a failing command is recorded, the other measurements still run
        log(f"{name}: FAILED: {exc}")
        return {"command": cmd, "peer": peer, "error": str(exc)}
    a, b = statistics.median(ours), statistics.median(theirs)
    row = {
        "command": cmd,
        "peer": peer,
        "runs": runs,
        "median_seconds": a,
        "peer_median_seconds": b,
        "ratio": a / b,
        "limit": limit,
        "within_limit": a / b <= limit,
        "seconds": ours,
        "peer_seconds": theirs,
    }
    log(f"{name}: {a:.3f} s vs peer {b:.3f} s -> {a / b:.2f}x (limit {limit:g}x)")
    return row


def _import_profile(code: str, top: int = 25) -> dict:
    """``python -X importtime -c code``: slowest modules (cumulative, microseconds) and heavy ones."""
    proc = subprocess.run([sys.executable, "-X", "importtime", "-c", code], capture_output=True, text=True, env=_env())
    rows = []
    for line in proc.stderr.splitlines():
        if not line.startswith("import time:") or "cumulative" in line:
            continue
        self_us, cumulative_us, name = _split(line)
        rows.append(
            {
                "module": name.strip(),
                "self_us": self_us,
                "cumulative_us": cumulative_us,
                "depth": (len(name) - len(name.lstrip())) // 2,
            }
        )
    total = sum(r["self_us"] for r in rows)
    loaded = {r["module"] for r in rows}
    heavy = [h for h in HEAVY if h in loaded]
    chains = {h: _chain(rows, next(i for i, r in enumerate(rows) if r["module"] == h)) for h in heavy}
    top_level = sorted((r for r in rows if r["depth"] == 0), key=lambda r: -r["cumulative_us"])[:top]
    synth_rows = sorted((r for r in rows if r["module"].startswith("synth")), key=lambda r: -r["cumulative_us"])
    return {
        "code": code,
        "total_ms": total / 1000,
        "heavy_modules": heavy,
        "heavy_import_chains": chains,
        "slowest_top_level": top_level,
        "synth_modules": synth_rows[:top],
        "returncode": proc.returncode,
    }


def _chain(rows: list[dict], i: int) -> list[str]:
    """The modules whose import pulled in ``rows[i]``, outermost first (importtime prints a module
    after everything it imports, one indentation level deeper)."""
    chain = [rows[i]["module"]]
    depth = rows[i]["depth"]
    for r in rows[i + 1 :]:
        if r["depth"] < depth:
            chain.append(r["module"])
            depth = r["depth"]
            if depth == 0:
                break
    return chain[::-1]


def _split(line: str) -> tuple[int, int, str]:
    """``import time: SELF | CUMULATIVE | <indent>NAME`` -> (self, cumulative, indented name)."""
    head, cumulative, name = line.split("|", 2)
    return int(head.split(":", 1)[1]), int(cumulative), name.rstrip("\n")[1:]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=7)
    ap.add_argument("--size", default="1920x1080")
    ap.add_argument("--json", type=Path, default=RESULTS)
    a = ap.parse_args(argv)
    width, height = (int(v) for v in a.size.lower().split("x"))
    synth = _synth_command()
    log = print
    out: dict = {"benchmark": "startup", "python": sys.version.split()[0], "size": [width, height]}
    with tempfile.TemporaryDirectory(prefix="synth-startup-") as tmp:
        folder = Path(tmp)
        clip, field = _make_inputs(folder, width, height)
        option = _vectors_option(synth)
        out["vectors_option"] = option
        out["help"] = _ratio(
            "synth --help",
            [*synth, "--help"],
            [sys.executable, "-c", "import numpy, cv2, typer"],
            a.runs,
            HELP_LIMIT,
            log,
        )
        frame = [
            *synth,
            "frame",
            str(clip),
            "--past",
            "0",
            "--future",
            "1",
            "--t",
            "0.5",
            option,
            str(field),
            "-o",
            str(folder / "synth.y4m"),
        ]
        peer = [sys.executable, str(HERE / "dis_interpolate.py"), str(clip), str(folder / "dis.y4m")]
        out["frame"] = _ratio("synth frame", frame, peer, a.runs, FRAME_LIMIT, log)
        frame_args = ["synth", *frame[len(synth) :]]
        out["imports"] = {
            "import synth.cli": _import_profile("import synth.cli"),
            "synth --help": _import_profile(
                "import sys; sys.argv = ['synth', '--help']\nfrom synth.cli import main\ntry:\n main()\n"
                "except SystemExit:\n pass"
            ),
            "synth frame": _import_profile(
                f"import sys; sys.argv = {frame_args!r}\nfrom synth.cli import main\ntry:\n main()\n"
                "except SystemExit:\n pass"
            ),
        }
    for name, prof in out["imports"].items():
        log(f"{name}: imports {prof['total_ms']:.0f} ms; heavy: {', '.join(prof['heavy_modules']) or 'none'}")
    from synth.io.jsonout import dumps_strict

    a.json.parent.mkdir(parents=True, exist_ok=True)
    a.json.write_text(dumps_strict(out) + "\n")
    log(f"wrote {a.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
