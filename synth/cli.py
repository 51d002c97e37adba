"""The ``synth`` command line: the only module that imports typer.

Each command parses its options, calls one library function and formats the result. Library
errors (`synth.errors.SynthError`, a `ValueError`) become one line on stderr and exit code 2;
unexpected failures become one line too (set ``SYNTH_DEBUG=1`` for the traceback), exit code 3.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path
from typing import Optional

import typer
from typer.core import TyperGroup
from typer.exceptions import TyperException

from .errors import SynthError

EXIT_INPUT_ERROR = 2
EXIT_INTERNAL_ERROR = 3


class _OneLineErrors(TyperGroup):
    """Turns exceptions raised by a command into one line on stderr and a non-zero exit."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except (typer.Exit, typer.Abort, TyperException):
            raise
        except SynthError as exc:
            typer.echo(f"synth: error: {exc}", err=True)
            raise typer.Exit(EXIT_INPUT_ERROR) from None
        except (OSError, ValueError) as exc:
            if os.environ.get("SYNTH_DEBUG"):
                raise
            typer.echo(f"synth: error: {exc}", err=True)
            raise typer.Exit(EXIT_INPUT_ERROR) from None
        except KeyboardInterrupt:
            typer.echo("synth: interrupted", err=True)
            raise typer.Exit(130) from None
        except Exception as exc:  # noqa: BLE001 - last line of defence: never a traceback
            if os.environ.get("SYNTH_DEBUG"):
                raise
            typer.echo(f"synth: internal error: {type(exc).__name__}: {exc} (set SYNTH_DEBUG=1 for details)", err=True)
            raise typer.Exit(EXIT_INTERNAL_ERROR) from None


app = typer.Typer(
    cls=_OneLineErrors,
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    help="Interpolated reference frames from coded motion vectors, for video-coding research.",
)


@app.callback()
def _root() -> None:
    """Interpolated reference frames from coded motion vectors, for video-coding research."""


def _print_json(obj) -> None:
    typer.echo(json.dumps(obj, indent=2, sort_keys=False, default=str))


# =============================================================================================
# Clips: info  (issue 2)
# =============================================================================================


@app.command()
def info(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    frame: int = typer.Option(0, "--frame", "-f", help="Frame whose plane statistics are shown."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON instead of a table."),
) -> None:
    """Show a clip's format, size, frame count and one frame's plane statistics."""
    from .clipinfo import describe_clip

    desc = describe_clip(clip, frame=frame)
    if as_json:
        _print_json(desc)
        return
    for key, value in desc.items():
        if key == "planes":
            for name, st in value.items():
                typer.echo(f"  {name:<3} min {st['min']:>6}  max {st['max']:>6}  mean {st['mean']:10.3f}")
        else:
            typer.echo(f"{key:<14} {value}")


# =============================================================================================
# Coded motion: vectors  (issue 3)
# =============================================================================================


@app.command()
def vectors(
    clip: Path = typer.Argument(..., help="Clip file (.y4m, or any video OpenCV decodes)."),
    coded: int = typer.Option(..., "--coded", help="Picture number whose blocks get vectors."),
    ref: int = typer.Option(..., "--ref", help="Picture number the vectors point to."),
    output: Path = typer.Option(..., "--output", "-o", help="Field file: .json, .npz, or .csv (export)."),
    search_range: int = typer.Option(64, "--range", help="Largest vector component, luma samples."),
    blocks: str = typer.Option("64,32,16,8", "--blocks", help="Block sizes the quadtree may use."),
    qp: int = typer.Option(27, "--qp", help="QP setting the rate weight (0..51); higher = cheaper, smoother field."),
    overlay: Optional[Path] = typer.Option(None, "--overlay", help="PNG with block outlines and arrows."),
    as_json: bool = typer.Option(False, "--json", help="Print the summary as JSON."),
) -> None:
    """Estimate codec-like block vectors from one picture of a clip to another."""
    from .vector_job import parse_block_sizes, run_vectors

    summary = run_vectors(
        clip, coded=coded, reference=ref, output=output, qp=qp, search_range=search_range,
        block_sizes=parse_block_sizes(blocks), overlay=overlay,
    )  # fmt: skip
    if as_json:
        _print_json(summary)
        return
    sizes = ", ".join(f"{k}: {v}" for k, v in summary["blocks_by_size"].items())
    typer.echo(f"field          picture {coded} -> picture {ref}, written to {summary['output']}")
    typer.echo(f"blocks         {summary['blocks']} ({sizes})")
    typer.echo(f"intra share    {100 * summary['intra_share']:.1f} % of the area")
    typer.echo(f"mean |v|       {summary['mean_vector_length']:.2f} luma samples")
    typer.echo(f"vector bits    {summary['vector_bits']}")
    typer.echo(
        f"prediction     {summary['mc_psnr_y']:.2f} dB luma PSNR with the field, "
        f"{summary['zero_motion_psnr_y']:.2f} dB with zero motion"
    )
    typer.echo(f"time           {summary['seconds']:.2f} s (QP {qp}, range +-{search_range})")
    if summary["overlay"]:
        typer.echo(f"overlay        {summary['overlay']}")


# =============================================================================================
# Synthesis: frame, calibrate  (issue 4)
# =============================================================================================


# =============================================================================================
# Encoder side: export, rd  (issue 5)
# =============================================================================================


# =============================================================================================
# Evaluation workbench: compare, gop, demo  (issue 6)
# =============================================================================================


# =============================================================================================
# Studies at scale: study  (issue 7)
# =============================================================================================


def main() -> None:
    """Console-script entry point."""
    app()


if __name__ == "__main__":
    main()
