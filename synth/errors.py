"""The project's exception types.

Every error a user can cause (bad file, bad parameter, mismatched inputs) is raised as a subclass
of :class:`SynthError`, which derives from :class:`ValueError`. The CLI turns these into one line on
stderr and a non-zero exit code.
"""

from __future__ import annotations

__all__ = ["SynthError", "FormatError", "ParameterError"]


class SynthError(ValueError):
    """Base class of every error that bad input or bad parameters can cause."""


class FormatError(SynthError):
    """A file is missing, truncated, malformed or of an unsupported kind."""


class ParameterError(SynthError):
    """A parameter is out of range or inconsistent with the inputs."""
