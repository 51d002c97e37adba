"""Checks of output options, made before a command computes or writes anything.

The rules (README, "Output files"):

- a file output's suffix names its format, and the command writes that format or refuses the
  name (`check_output_file`);
- the folder a file output goes into must exist: a missing folder is an error, never created
  silently (`check_output_file`);
- a folder output (``--report DIR``, ``--maps DIR``, a study folder) may be created by the
  command, but only inside an existing folder: missing parents are an error (`check_output_dir`);
- no output may be an input of the same run or another output of it (`check_distinct`).

Every command runs all of its output checks before its first output is written.
"""

from __future__ import annotations

import os
from pathlib import Path

from synth.errors import ParameterError

__all__ = ["check_output_file", "check_output_dir", "check_distinct", "suffix_of", "PICTURE_FORMATS"]

#: Picture files the picture-writing options take (`synth.io.write_clip` writes each by its name).
PICTURE_FORMATS = {".y4m": "YUV4MPEG2", ".yuv": "raw planar"}


def suffix_of(path: str | os.PathLike) -> str:
    """The lower-case suffix of a file name (``""`` when it has none)."""
    return Path(path).suffix.lower()


def _parent_exists(path: Path, option: str, what: str) -> None:
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.exists():
        raise ParameterError(
            f"{option}: the folder {str(parent)!r} of {what} {str(path)!r} does not exist (create it first)"
        )
    if not parent.is_dir():
        raise ParameterError(f"{option}: {str(parent)!r} is not a folder, so {str(path)!r} cannot be written")


def check_output_file(path, formats: dict[str, str] | tuple[str, ...], *, option: str) -> Path:
    """`path` as a Path, refused unless its suffix is one of `formats` and its folder exists.

    Parameters
    ----------
    path : path-like
    formats : dict or tuple
        Accepted suffixes (``".y4m"``), or a dict of suffix -> format name for the message
        (``{".y4m": "YUV4MPEG2", ".yuv": "raw planar"}``).
    option : str
        The option as the user typed it (``--output``).

    Raises
    ------
    ParameterError
        A suffix the command does not write, an existing folder of that name, or a missing folder.
    """
    p = Path(path)
    names = formats if isinstance(formats, dict) else {s: "" for s in formats}
    if suffix_of(p) not in names:
        accepted = " or ".join(f"{s} ({n})" if n else s for s, n in names.items())
        raise ParameterError(f"{option} must end in {accepted}: the name says the format; got {str(path)!r}")
    if p.is_dir():
        raise ParameterError(f"{option} must be a file, got the directory {str(path)!r}")
    _parent_exists(p, option, "the file")
    return p


def check_output_dir(path, *, option: str) -> Path:
    """`path` as a Path: an existing folder, or a new one whose parent folder exists.

    Raises
    ------
    ParameterError
        When `path` is an existing file, or its parent folder is missing.
    """
    p = Path(path)
    if p.exists() and not p.is_dir():
        raise ParameterError(f"{option} must be a directory, got the file {str(path)!r}")
    if not p.exists():
        _parent_exists(p, option, "the new folder")
    return p


def _same(a: Path, b: Path) -> bool:
    try:
        if a.exists() and b.exists():
            return os.path.samefile(a, b)
    except OSError:
        pass
    return os.path.abspath(a) == os.path.abspath(b)


def check_distinct(outputs: dict[str, os.PathLike | str | None], inputs: dict[str, os.PathLike | str | None]) -> None:
    """Refuse an output that is also an input, or two outputs of one name.

    Parameters
    ----------
    outputs, inputs : dict
        Option (as typed) -> path; None values are skipped.

    Raises
    ------
    ParameterError
    """
    outs = [(k, Path(v)) for k, v in outputs.items() if v is not None]
    ins = [(k, Path(v)) for k, v in inputs.items() if v is not None]
    for i, (name, p) in enumerate(outs):
        for other, q in ins:
            if _same(p, q):
                raise ParameterError(f"{name} {str(p)!r} is the {other} input of this run: it would be overwritten")
        for other, q in outs[i + 1 :]:
            if _same(p, q):
                raise ParameterError(f"{name} and {other} name the same file {str(p)!r}")
