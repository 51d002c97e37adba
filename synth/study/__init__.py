"""Test-set studies: manifests, job expansion, resumable execution, aggregation.

Typical use::

    from synth.study import load_manifest, run_study, LocalExecutor
    manifest = load_manifest("study.toml")
    outcome = run_study(manifest, "out/", executor=LocalExecutor(2))

See README.md ("Studies") for the manifest format and DEVELOPERS.md for adding a job kind.
"""

from synth.study.executors import DaskExecutor, Executor, LocalExecutor, make_executor
from synth.study.jobs import ClipHasher, Job, code_version
from synth.study.kinds import JobKind, KindUnavailable, Param, get_kind, kind_names, register_kind
from synth.study.manifest import Manifest, load_manifest
from synth.study.runner import StudyOutcome, StudyProgress, plan_study, run_study
from synth.study.stripes import plan_stripes, run_striped, synthesise_striped

__all__ = [
    "load_manifest",
    "Manifest",
    "run_study",
    "plan_study",
    "StudyOutcome",
    "StudyProgress",
    "Executor",
    "LocalExecutor",
    "DaskExecutor",
    "make_executor",
    "Job",
    "ClipHasher",
    "code_version",
    "JobKind",
    "Param",
    "KindUnavailable",
    "register_kind",
    "get_kind",
    "kind_names",
    "plan_stripes",
    "run_striped",
    "synthesise_striped",
]
