"""Study manifests: which clips, which job kinds, which parameter grids.

A manifest is a TOML file (parsed with the standard library's `tomllib`)::

    title = "dock cranes, gaps 2 and 4"          # optional
    description = "..."                          # optional

    [[clips]]                                    # one table per clip or glob
    path = "footage/*.y4m"                       # required; relative to the manifest
    name = "crane"                               # optional label (single files only)
    pictures = [0, 8]                            # optional: first and last picture used
    window = [0, 0, 128, 96]                     # optional: x, y, width, height (luma)
    raw = { width = 640, height = 360 }          # .yuv only, unless the name says WxH; chroma,
                                                 # bit_depth, rate optional

    [[tasks]]                                    # one table per job kind to run
    kind = "blend"                               # a registered job kind
    clips = ["crane*"]                           # optional: clip names (wildcards) it runs on
    grid = { gap = [2, 4], method = ["linear", "nearest"] }   # cartesian product
    fixed = { }                                  # parameters shared by every job of the task

Everything is validated on load, before any job starts; an error is one line naming the manifest
and the offending key, e.g. ``study.toml: tasks[0].grid.gap[1]: expected an integer, got a string
('four')``.
"""

from __future__ import annotations

import fnmatch
import glob
import itertools
import os
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from synth.errors import FormatError, ParameterError
from synth.io.jsonread import read_text_document
from synth.study.clipsource import raw_geometry_for
from synth.study.kinds import get_kind

__all__ = ["ClipEntry", "Task", "JobSpec", "Manifest", "load_manifest", "parse_manifest"]

_TOP_KEYS = {"title", "description", "clips", "tasks"}
_CLIP_KEYS = {"path", "name", "pictures", "window", "raw"}
_TASK_KEYS = {"kind", "clips", "grid", "fixed"}
_RAW_SUFFIXES = {".yuv"}


@dataclass(frozen=True)
class ClipEntry:
    """One clip of a study: a label, an absolute path and its clip options (raw, pictures, window)."""

    name: str
    path: Path
    options: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class Task:
    """One ``[[tasks]]`` table: a job kind, the clips it runs on, its grid and fixed parameters."""

    index: int
    kind: str
    clips: tuple[str, ...] | None
    grid: dict[str, list]
    fixed: dict[str, Any]

    def combinations(self) -> list[dict[str, Any]]:
        """Parameter sets of the task: ``fixed`` merged with each point of the grid's cartesian product
        (grid keys in manifest order, the last key varying fastest)."""
        keys = list(self.grid)
        out = []
        for values in itertools.product(*(self.grid[k] for k in keys)):
            params = dict(self.fixed)
            params.update(zip(keys, values))
            out.append(params)
        return out


@dataclass(frozen=True)
class JobSpec:
    """One job before hashing: a kind, a clip and the full parameter set (clip options included)."""

    kind: str
    clip: ClipEntry
    params: dict[str, Any]
    task: int


@dataclass
class Manifest:
    """A validated study manifest."""

    path: Path
    title: str
    description: str
    clips: list[ClipEntry]
    tasks: list[Task]

    def expand(self) -> list[JobSpec]:
        """Every job of the study, in manifest order (task, clip, grid point); duplicates removed."""
        jobs: list[JobSpec] = []
        seen: set[str] = set()
        for task in self.tasks:
            kind = get_kind(task.kind)
            for clip in self._clips_of(task):
                for combo in task.combinations():
                    params = kind.resolve(combo, where=f"tasks[{task.index}]")
                    params.update(clip.options)
                    key = repr((task.kind, str(clip.path), sorted(params.items(), key=lambda kv: kv[0])))
                    if key in seen:
                        continue
                    seen.add(key)
                    jobs.append(JobSpec(task.kind, clip, params, task.index))
        return jobs

    def _clips_of(self, task: Task) -> list[ClipEntry]:
        if task.clips is None:
            return list(self.clips)
        return [c for c in self.clips if any(fnmatch.fnmatchcase(c.name, pat) for pat in task.clips)]


def _type_name(value: Any) -> str:
    names = {bool: "true/false", int: "an integer", float: "a number", str: "a string", list: "a list", dict: "a table"}
    return names.get(type(value), type(value).__name__)


def _expect(cond: bool, where: str, message: str) -> None:
    if not cond:
        raise ParameterError(f"{where}: {message}")


def _check_keys(table: dict, allowed: set[str], where: str) -> None:
    for key in table:
        if key not in allowed:
            prefix = f"{where}." if where else ""
            raise ParameterError(f"{prefix}{key}: unknown key (allowed: {', '.join(sorted(allowed))})")


def _int_list(value: Any, n: int, where: str) -> list[int]:
    _expect(
        isinstance(value, list)
        and len(value) == n
        and all(isinstance(v, int) and not isinstance(v, bool) for v in value),
        where,
        f"expected a list of {n} integers, got {_type_name(value)} ({value!r})",
    )
    return [int(v) for v in value]


def _clip_entries(i: int, table: Any, root: Path) -> list[tuple[str | None, Path, dict]]:
    where = f"clips[{i}]"
    _expect(isinstance(table, dict), where, f"expected a table, got {_type_name(table)}")
    _check_keys(table, _CLIP_KEYS, where)
    _expect("path" in table, f"{where}.path", "missing (every clip needs a path or a glob)")
    pattern = table["path"]
    _expect(isinstance(pattern, str) and pattern, f"{where}.path", f"expected a path or glob, got {pattern!r}")
    options: dict[str, Any] = {}
    if "pictures" in table:
        first, last = _int_list(table["pictures"], 2, f"{where}.pictures")
        _expect(0 <= first <= last, f"{where}.pictures", f"expected 0 <= first <= last, got [{first}, {last}]")
        options["pictures"] = [first, last]
    if "window" in table:
        x, y, w, h = _int_list(table["window"], 4, f"{where}.window")
        _expect(
            x >= 0 and y >= 0 and w > 0 and h > 0,
            f"{where}.window",
            f"expected x, y >= 0 and width, height > 0, got {[x, y, w, h]}",
        )
        options["window"] = [x, y, w, h]
    if "raw" in table:
        _expect(isinstance(table["raw"], dict), f"{where}.raw", f"expected a table, got {_type_name(table['raw'])}")
        _check_keys(table["raw"], {"width", "height", "chroma", "bit_depth", "rate"}, f"{where}.raw")
    try:
        paths = _clip_paths(pattern, root, where, named="name" in table)
    except OSError as exc:
        raise ParameterError(f"{where}.path: cannot use {_cut(pattern)!r}: {exc.strerror or exc}") from None
    name = table.get("name")
    if name is not None:
        _expect(
            isinstance(name, str) and name.strip() != "", f"{where}.name", f"expected a non-empty string, got {name!r}"
        )
    out = []
    for p in paths:
        opts = dict(options)
        if p.suffix.lower() in _RAW_SUFFIXES:
            opts["raw"] = raw_geometry_for(p, table.get("raw"), where=f"{where}.raw")
        else:
            _expect("raw" not in table, f"{where}.raw", f"only for raw .yuv files, but {p.name} is not one")
        try:
            out.append((name, p.resolve(), opts))
        except OSError as exc:
            raise ParameterError(f"{where}.path: cannot use {_cut(str(p))!r}: {exc.strerror or exc}") from None
    return out


def _cut(text: str, most: int = 80) -> str:
    """`text` for a one-line message: at most `most` characters."""
    return text if len(text) <= most else text[: most - 3] + "..."


def _clip_paths(pattern: str, root: Path, where: str, *, named: bool) -> list[Path]:
    """The files a clip entry's path or glob names (OSError from the file system passes through)."""
    full = pattern if os.path.isabs(pattern) else str(root / pattern)
    if glob.has_magic(pattern):
        paths = sorted(Path(p) for p in glob.glob(full, recursive=True) if os.path.isfile(p))
        _expect(bool(paths), f"{where}.path", f"glob {_cut(pattern)!r} matches no file (relative to {root})")
        _expect(not named, f"{where}.name", "a glob's clips are named after their files; name only single files")
        return paths
    path = Path(full)
    _expect(path.is_file(), f"{where}.path", f"no such file {_cut(pattern)!r} (relative to {root})")
    return [path]


def _grid(task_where: str, grid: Any) -> dict[str, list]:
    where = f"{task_where}.grid"
    _expect(isinstance(grid, dict), where, f"expected a table of value lists, got {_type_name(grid)}")
    out: dict[str, list] = {}
    for key, values in grid.items():
        kw = f"{where}.{key}"
        _expect(
            isinstance(values, list),
            kw,
            f"expected a list of values, got {_type_name(values)} ({values!r}); single values go under fixed",
        )
        _expect(len(values) > 0, kw, "expected a non-empty list of values")
        for j, v in enumerate(values):
            _expect(
                isinstance(v, (bool, int, float, str)),
                f"{kw}[{j}]",
                f"expected a string, number or true/false, got {_type_name(v)}",
            )
        _expect(len({repr(v) for v in values}) == len(values), kw, f"repeats a value: {values!r}")
        out[key] = list(values)
    return out


def _task(i: int, table: Any, clip_names: list[str]) -> Task:
    where = f"tasks[{i}]"
    _expect(isinstance(table, dict), where, f"expected a table, got {_type_name(table)}")
    _check_keys(table, _TASK_KEYS, where)
    _expect("kind" in table, f"{where}.kind", "missing (which job kind to run)")
    kind_name = table["kind"]
    _expect(isinstance(kind_name, str), f"{where}.kind", f"expected a string, got {_type_name(kind_name)}")
    try:
        kind = get_kind(kind_name)
    except ParameterError as exc:
        raise ParameterError(f"{where}.kind: {exc}") from None
    reason = kind.unavailable_reason()
    if reason:
        raise ParameterError(f"{where}.kind: {reason}")
    grid = _grid(where, table.get("grid", {}))
    fixed = table.get("fixed", {})
    _expect(isinstance(fixed, dict), f"{where}.fixed", f"expected a table, got {_type_name(fixed)}")
    for key in fixed:
        _expect(key not in grid, f"{where}.fixed.{key}", "is also in the grid; set it in one place")
    clips = table.get("clips")
    if clips is not None:
        _expect(
            isinstance(clips, list) and clips and all(isinstance(c, str) for c in clips),
            f"{where}.clips",
            f"expected a non-empty list of clip names, got {clips!r}",
        )
        for j, pat in enumerate(clips):
            _expect(
                any(fnmatch.fnmatchcase(n, pat) for n in clip_names),
                f"{where}.clips[{j}]",
                f"{pat!r} names no clip (clips: {', '.join(clip_names)})",
            )
        clips = tuple(clips)
    task = Task(i, kind_name, clips, grid, dict(fixed))
    # Check every parameter value against the kind's declaration: the grid values one by one (so
    # the message names the offending entry), then the fixed values.
    for key, values in grid.items():
        if kind.params is not None and key not in kind.params:
            known = ", ".join(sorted(kind.params)) or "none"
            raise ParameterError(f"{where}.grid.{key}: unknown parameter of kind {kind.name!r} (known: {known})")
        for j, v in enumerate(values):
            try:
                kind.resolve({key: v}, where=f"{where}.grid")
            except ParameterError as exc:
                raise ParameterError(str(exc).replace(f"{where}.grid.{key}:", f"{where}.grid.{key}[{j}]:", 1)) from None
    if kind.params is None:  # undeclared parameters: at least one type per grid key
        for key, values in grid.items():
            numeric = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values)
            _expect(
                numeric or len({type(v) for v in values}) == 1, f"{where}.grid.{key}", f"mixes value types: {values!r}"
            )
    kind.resolve(fixed, where=f"{where}.fixed")
    return task


def parse_manifest(data: dict, *, path: str | os.PathLike) -> Manifest:
    """Validate an already-parsed manifest table; `path` gives the directory clips are relative to.

    Raises
    ------
    ParameterError
        Naming the offending key (without the file name prefix).
    """
    path = Path(path)
    root = path.parent.resolve()
    _check_keys(data, _TOP_KEYS, "")
    title = data.get("title", path.stem)
    description = data.get("description", "")
    for key, value in (("title", title), ("description", description)):
        _expect(isinstance(value, str), key, f"expected a string, got {_type_name(value)}")
    _expect("clips" in data, "clips", "missing (add at least one [[clips]] table)")
    _expect("tasks" in data, "tasks", "missing (add at least one [[tasks]] table)")
    raw_clips, raw_tasks = data["clips"], data["tasks"]
    _expect(isinstance(raw_clips, list) and raw_clips, "clips", "expected one or more [[clips]] tables")
    _expect(isinstance(raw_tasks, list) and raw_tasks, "tasks", "expected one or more [[tasks]] tables")

    clips: list[ClipEntry] = []
    names: dict[str, int] = {}
    for i, table in enumerate(raw_clips):
        for name, p, options in _clip_entries(i, table, root):
            label = name or p.stem
            if label in names:
                raise ParameterError(
                    f"clips[{i}]: clip name {label!r} is already used by clips[{names[label]}]; give one a distinct name"
                )
            names[label] = i
            clips.append(ClipEntry(label, p, options))
    tasks = [_task(i, t, list(names)) for i, t in enumerate(raw_tasks)]
    manifest = Manifest(path, title, description, clips, tasks)
    manifest.expand()  # resolves every job's parameters once more, so no job can fail validation later
    return manifest


def load_manifest(path: str | os.PathLike) -> Manifest:
    """Read and validate a study manifest.

    Parameters
    ----------
    path : path-like
        The TOML file; clip paths and globs in it are relative to its folder.

    Returns
    -------
    Manifest

    Raises
    ------
    FormatError
        When the file is missing or is not valid TOML (message with the line and column).
    ParameterError
        When a key is unknown or missing, a clip is missing, a glob is empty, a job kind is unknown
        or unavailable, or a grid value has the wrong type: one line, ``FILE: key.path: rule``.
    """
    path = Path(path)
    text = read_text_document(path, what="manifest file")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise FormatError(f"{path.name}: not valid TOML: {exc}") from None
    except RecursionError:
        raise FormatError(f"{path.name}: not readable TOML: nested too deeply") from None
    except ValueError as exc:  # e.g. an integer beyond Python's conversion limit
        raise FormatError(f"{path.name}: not readable TOML: {_cut(str(exc))}") from None
    try:
        return parse_manifest(data, path=path)
    except ParameterError as exc:
        raise ParameterError(f"{path.name}: {exc}") from None
