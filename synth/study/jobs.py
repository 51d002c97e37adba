"""Job identity and job records.

A job is identified by a hash of its inputs: the job kind, the SHA-256 of the clip file's content,
the parameters as canonical JSON (sorted keys, no spaces) and the code version (the package version
plus a hash of synth's source files). Changing any of them makes a new job; anything else (the clip's
path or name, the output folder, the executor) does not.

A finished job is one JSON file ``jobs/<id>.json`` under the study folder, written atomically. It
carries the job's inputs, its status (``ok`` or ``failed``), its result rows or its error, and when,
where and in which run it ran.
"""

from __future__ import annotations

import functools
import hashlib
import json
import os
from collections.abc import Iterable
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from synth.errors import FormatError
from synth.io import atomic_write_text
from synth.io.jsonout import dumps_strict

__all__ = [
    "Job",
    "ClipHasher",
    "canonical_json",
    "code_version",
    "job_id",
    "make_jobs",
    "read_record",
    "write_record",
    "records_dir",
]


def canonical_json(obj: Any) -> str:
    """JSON with sorted keys and no spaces: equal inputs give equal text (used for hashing)."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


def _source_roots() -> list[tuple[str, Path]]:
    import synth
    import synth.io

    return [("synth", Path(synth.__file__).parent), ("synth.io", Path(synth.io.__file__).parent)]


@functools.lru_cache(maxsize=1)
def code_version() -> str:
    """``<synth.__version__>+<12 hex digits>``: the version plus a SHA-256 of every source file of the
    package (``synth`` and ``synth.io``), so an edited checkout never reuses results of another."""
    import synth

    digest = hashlib.sha256()
    for label, root in _source_roots():
        for path in sorted(root.rglob("*.py")):
            if "__pycache__" in path.parts:
                continue
            rel = path.relative_to(root).as_posix()
            if label == "synth" and rel.startswith("io/"):
                continue
            digest.update(f"{label}/{rel}\0".encode())
            digest.update(path.read_bytes())
            digest.update(b"\0")
    return f"{synth.__version__}+{digest.hexdigest()[:12]}"


class ClipHasher:
    """SHA-256 of clip files, computed once per file and cached by (size, mtime) in a JSON file.

    Parameters
    ----------
    cache_path : path-like or None
        Where the cache lives between runs (the study folder's ``cache/clip-hashes.json``); None
        keeps it in memory only.
    """

    def __init__(self, cache_path: str | os.PathLike | None = None):
        self.cache_path = None if cache_path is None else Path(cache_path)
        self._cache: dict[str, dict] = {}
        self.computed = 0
        if self.cache_path is not None and self.cache_path.is_file():
            try:
                data = json.loads(self.cache_path.read_text(encoding="utf-8"))
                if isinstance(data, dict):
                    self._cache = {k: v for k, v in data.items() if isinstance(v, dict)}
            except (OSError, ValueError):
                self._cache = {}  # a damaged cache is only a cache: rebuild it

    def hash(self, path: str | os.PathLike) -> str:
        """SHA-256 (hex) of the file's content."""
        path = Path(path).resolve()
        st = path.stat()
        key = str(path)
        hit = self._cache.get(key)
        if (
            hit
            and hit.get("size") == st.st_size
            and hit.get("mtime_ns") == st.st_mtime_ns
            and isinstance(hit.get("sha256"), str)
        ):
            return hit["sha256"]
        digest = hashlib.sha256()
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 22), b""):
                digest.update(block)
        value = digest.hexdigest()
        self._cache[key] = {"size": st.st_size, "mtime_ns": st.st_mtime_ns, "sha256": value}
        self.computed += 1
        return value

    def save(self) -> None:
        """Write the cache (atomically) when it has a file."""
        if self.cache_path is not None:
            atomic_write_text(self.cache_path, json.dumps(self._cache, indent=1, sort_keys=True))


@dataclass(frozen=True)
class Job:
    """One unit of work: a job kind run on one clip with one parameter set."""

    id: str
    kind: str
    clip: str
    clip_path: str
    clip_sha256: str
    params: dict
    code_version: str
    task: int

    def to_dict(self) -> dict:
        return asdict(self)


def job_id(kind: str, clip_sha256: str, params: dict, code: str) -> str:
    """The job's identity: first 20 hex digits of SHA-256 over the canonical JSON of its inputs."""
    text = canonical_json({"kind": kind, "clip_sha256": clip_sha256, "params": params, "code": code})
    return hashlib.sha256(text.encode("ascii")).hexdigest()[:20]


def make_jobs(specs: Iterable, hasher: ClipHasher, *, progress=None) -> list[Job]:
    """Turn manifest job specs (`synth.study.manifest.JobSpec`) into identified jobs.

    Each clip file is hashed once (and cached by size and mtime across runs). `progress(done, total)`
    is called after each distinct clip is hashed.
    """
    specs = list(specs)
    code = code_version()
    paths = sorted({str(s.clip.path) for s in specs})
    hashes: dict[str, str] = {}
    for i, p in enumerate(paths):
        hashes[p] = hasher.hash(p)
        if progress is not None:
            progress(i + 1, len(paths))
    jobs = []
    for s in specs:
        h = hashes[str(s.clip.path)]
        jobs.append(
            Job(
                job_id(s.kind, h, s.params, code),
                s.kind,
                s.clip.name,
                str(s.clip.path),
                h,
                dict(s.params),
                code,
                s.task,
            )
        )
    return jobs


def records_dir(out_dir: str | os.PathLike) -> Path:
    """The folder of job records inside a study folder."""
    return Path(out_dir) / "jobs"


def write_record(out_dir: str | os.PathLike, record: dict) -> Path:
    """Write a job record atomically as ``jobs/<id>.json``; returns its path."""
    path = records_dir(out_dir) / f"{record['id']}.json"
    atomic_write_text(path, dumps_strict(record, indent=1, sort_keys=False) + "\n")
    return path


def read_record(path: str | os.PathLike) -> dict:
    """Read one job record.

    Raises
    ------
    FormatError
        When the file is not a job record (damaged or foreign).
    """
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise FormatError(f"{path}: not a readable job record ({exc})") from None
    if not isinstance(data, dict) or not {"id", "status"} <= data.keys():
        raise FormatError(f"{path}: not a job record (no id or status)")
    return data
