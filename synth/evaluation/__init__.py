"""Evaluation: the workbench (compare, GOP runs), tables, plots and report pages."""

from synth.lazy import lazy_exports

_EXPORTS = {
    "compare_clip": "synth.evaluation.compare",
    "run_gop": "synth.evaluation.gop",
    "write_report": "synth.evaluation.report",
}
__all__ = sorted(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
