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


_INFO_LABELS = {
    "file": "file",
    "format": "format",
    "width": "width",
    "height": "height",
    "frames": "frames",
    "chroma_format": "chroma",
    "bit_depth": "bit depth",
    "frame_rate": "frame rate",
    "interlacing": "interlacing",
    "chroma_siting": "chroma siting",
    "pixel_aspect": "pixel aspect",
}


@app.command()
def info(
    clip: Path = typer.Argument(
        ..., help="Clip: .y4m, raw .yuv, image pattern (frame_%03d.png) or any video OpenCV decodes."
    ),
    frame: int = typer.Option(0, "--frame", "-f", help="Frame whose plane statistics are shown (negative: from the end)."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON instead of a table."),
    size: Optional[str] = typer.Option(None, "--size", help="Raw .yuv only: WIDTHxHEIGHT (else taken from the file name)."),
    chroma: Optional[str] = typer.Option(None, "--chroma", help="Raw .yuv / images: 420, 422, 444 or mono."),
    bit_depth: Optional[int] = typer.Option(None, "--bit-depth", help="Raw .yuv / images: bits per sample, 8..16."),
    fps: Optional[float] = typer.Option(None, "--fps", help="Raw .yuv / images: frame rate to report."),
    matrix: Optional[str] = typer.Option(None, "--matrix", help="Images / compressed video: R'G'B' to Y'CbCr matrix, 601 (default) or 709."),
) -> None:
    """Show a clip's format, size, frame count, sample format, frame rate and one frame's plane statistics."""
    from .clipinfo import CHROMA_NAMES, describe_clip

    desc = describe_clip(
        clip, frame=frame, size=size, chroma_format=chroma, bit_depth=bit_depth, frame_rate=fps, matrix=matrix
    )
    if as_json:
        _print_json(desc)
        return
    for key, label in _INFO_LABELS.items():
        value = desc[key]
        if value is None:
            continue
        if key == "chroma_format":
            value = CHROMA_NAMES.get(value, value)
        elif key == "frame_rate" and desc["frame_rate_value"] is not None:
            value = f"{value} ({desc['frame_rate_value']:g}/s)"
        typer.echo(f"{label:<14} {value}")
    for k, v in desc["extra"].items():
        typer.echo(f"{'X tag':<14} {k}={v}" if v else f"{'X tag':<14} {k}")
    typer.echo(f"plane statistics of frame {desc['frame']}:")
    for name, st in desc["planes"].items():
        typer.echo(f"  {name:<3} min {st['min']:>6}  max {st['max']:>6}  mean {st['mean']:10.3f}")


# =============================================================================================
# Coded motion: vectors  (issue 3)
# =============================================================================================


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
