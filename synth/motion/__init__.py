"""Coded motion: the built-in block motion estimator and what works on its fields.

Modules: `estimator` (public entry `estimate_field`, `estimate_reference_fields`), `search`
(anchor-grid coarse-to-fine integer and sub-sample search), `subpel` (H.264 quarter-sample
interpolation), `cost` (lambda, vector bits, median predictor), `quadtree` (partition decision),
`rate` (bits of any field), `compensate` (motion-compensated prediction), `summary` and `overlay`
(what ``synth vectors`` prints and draws).
"""

from synth.lazy import lazy_exports

_EXPORTS = {
    "estimate_field": "synth.motion.estimator",
    "estimate_reference_fields": "synth.motion.estimator",
    "motion_compensate": "synth.motion.compensate",
    "summarize_field": "synth.motion.summary",
}
__all__ = sorted(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
