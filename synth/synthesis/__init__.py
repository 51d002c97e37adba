"""The synthesis core: vectors projected to time t, per-pixel candidates, sampling, the LMMSE
estimator, its parameters, reliability models and calibration.

Modules in data-flow order: `project` (vectors -> landed candidates at t), `candidates` (K nearest
per group), `candidate_stack`, `sampling` (reference samples and endpoint patches), `lmmse` (R, r and
the batched solver), `params` (`SynthParams`), `reliability`, `synthesiser` (`synthesise`,
`synthesise_with_maps`), `calibrate` and `oracles` (measurement tools).
"""

from synth.lazy import lazy_exports

_EXPORTS = {
    "synthesise": "synth.synthesis.synthesiser",
    "synthesise_with_maps": "synth.synthesis.synthesiser",
    "SynthesisResult": "synth.synthesis.synthesiser",
    "SynthParams": "synth.synthesis.params",
    "calibrate": "synth.synthesis.calibrate",
    "training_cases": "synth.synthesis.calibrate",
    "best_of_k": "synth.synthesis.oracles",
    "block_least_squares": "synth.synthesis.oracles",
}
__all__ = sorted(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
