"""The registry of job kinds a study can run.

A *job kind* is a name (``'blend'``, ``'compare'``, ``'gop'``, ``'rd'`` ...) bound to a function::

    run(clip_path, params: dict, *, progress=None) -> list[dict]

that measures one clip with one parameter setting and returns result rows (one dict of scalars per
row, typically one row per picture). Besides the function a kind declares the parameters it
accepts (name, allowed types, default, an optional check), so that a manifest is validated before
any job starts, and which numeric result columns are its headline figures (plotted in the report).

Kinds whose library function has not landed yet stay registered, with an ``available`` hook that
says why they cannot run; the manifest loader turns that into a one-line error.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from synth.errors import ParameterError

__all__ = [
    "Param",
    "JobKind",
    "KindUnavailable",
    "register_kind",
    "get_kind",
    "kind_names",
    "CLIP_OPTIONS",
]

#: Parameter keys a study adds to every job's params from the manifest's clip entry (see
#: `synth.study.clipsource`); job kinds must not declare parameters with these names.
CLIP_OPTIONS = ("raw", "pictures", "window")

RunFunction = Callable[..., list]


class KindUnavailable(ParameterError):
    """A job kind is registered but its library function is not available in this installation."""


@dataclass(frozen=True)
class Param:
    """One parameter a job kind accepts.

    Parameters
    ----------
    types : tuple of type
        Allowed Python types of the value as TOML delivers it (``int``, ``float``, ``str``,
        ``bool``). ``float`` also admits ``int`` values (converted). ``bool`` never counts as ``int``.
    default : object
        Value used when the manifest does not set the parameter; ``None`` for "let the kind decide".
    check : callable, optional
        ``check(value) -> str | None``: a rule the value must satisfy; returns a description of the
        rule when the value breaks it.
    help : str
        One line for the documentation.
    """

    types: tuple[type, ...]
    default: Any = None
    check: Callable[[Any], str | None] | None = None
    help: str = ""

    def coerce(self, value: Any) -> Any:
        """Return `value` converted to the parameter's type, or raise `TypeError` with the rule."""
        if isinstance(value, bool):
            if bool in self.types:
                return value
        elif isinstance(value, int) and int in self.types:
            return value
        elif isinstance(value, (int, float)) and float in self.types:
            return float(value)
        elif isinstance(value, str) and str in self.types:
            return value
        elif isinstance(value, list) and list in self.types:
            return value
        names = " or ".join(_TYPE_NAMES.get(t, t.__name__) for t in self.types)
        raise TypeError(f"expected {names}, got {_describe(value)}")


_TYPE_NAMES = {int: "an integer", float: "a number", str: "a string", bool: "true/false", list: "a list"}


def _describe(value: Any) -> str:
    kind = {bool: "true/false", int: "an integer", float: "a number", str: "a string", list: "a list", dict: "a table"}
    return f"{kind.get(type(value), type(value).__name__)} ({value!r})"


@dataclass(frozen=True)
class JobKind:
    """A registered job kind.

    Parameters
    ----------
    name : str
        Name used in manifests (``kind = "..."``).
    run : callable
        ``run(clip_path, params, *, progress=None) -> list[dict]``. `params` holds every declared
        parameter (defaults filled in) plus the clip options present in the manifest (`CLIP_OPTIONS`).
    params : dict of str to Param, or None
        Accepted parameters. None accepts any scalar parameters and passes them through unchecked.
    headline : tuple of str
        Numeric result columns the report plots.
    metrics : tuple of str, or None
        Result columns averaged in the per-clip and mean tables; None takes every column holding
        floating-point values.
    group_by : tuple of str
        Result columns that split the tables further (e.g. ``('config', 'qp')`` when a job's rows
        cover several configurations): means are taken per value of these columns.
    summary : str
        One line for `synth study --kinds` and the documentation.
    available : callable, optional
        ``available() -> str | None``: None when the kind can run, else why not.
    """

    name: str
    run: RunFunction
    params: dict[str, Param] | None = field(default_factory=dict)
    headline: tuple[str, ...] = ()
    metrics: tuple[str, ...] | None = None
    group_by: tuple[str, ...] = ()
    summary: str = ""
    available: Callable[[], str | None] | None = None

    def unavailable_reason(self) -> str | None:
        """None when the kind can run in this installation, else the reason it cannot."""
        return None if self.available is None else self.available()

    def resolve(self, given: dict[str, Any], *, where: str = "params") -> dict[str, Any]:
        """Check `given` against the declared parameters and fill in defaults.

        Raises
        ------
        ParameterError
            Naming ``where.<key>`` for an unknown parameter, a value of the wrong type or a value
            that breaks the parameter's rule.
        """
        out: dict[str, Any] = {}
        if self.params is None:
            for key, value in given.items():
                if not isinstance(value, (bool, int, float, str)):
                    raise ParameterError(
                        f"{where}.{key}: expected a string, number or true/false, got {_describe(value)}"
                    )
                out[key] = value
            return out
        for key, value in given.items():
            if key not in self.params:
                known = ", ".join(sorted(self.params)) or "none"
                raise ParameterError(f"{where}.{key}: unknown parameter of kind {self.name!r} (known: {known})")
            spec = self.params[key]
            try:
                value = spec.coerce(value)
            except TypeError as exc:
                raise ParameterError(f"{where}.{key}: {exc}") from None
            if spec.check is not None:
                rule = spec.check(value)
                if rule:
                    raise ParameterError(f"{where}.{key}: {rule}, got {value!r}")
            out[key] = value
        for key, spec in self.params.items():
            if key not in out and spec.default is not None:
                out[key] = spec.default
        return out


_REGISTRY: dict[str, JobKind] = {}


def register_kind(kind: JobKind, *, replace: bool = False) -> JobKind:
    """Add a job kind to the registry (see DEVELOPERS.md, "Adding a job kind").

    Raises
    ------
    ParameterError
        When the name is taken (and `replace` is false) or a parameter uses a clip-option name.
    """
    if kind.name in _REGISTRY and not replace:
        raise ParameterError(f"job kind {kind.name!r} is already registered")
    clash = set(kind.params or ()) & set(CLIP_OPTIONS)
    if clash:
        raise ParameterError(f"job kind {kind.name!r} declares reserved parameter names: {', '.join(sorted(clash))}")
    _REGISTRY[kind.name] = kind
    return kind


def _ensure_builtins() -> None:
    # The built-in kinds register themselves on import; importing here keeps `kinds` free of
    # import cycles (builtin_kinds imports this module).
    from synth.study import builtin_kinds  # noqa: F401


def get_kind(name: str) -> JobKind:
    """The registered job kind called `name`.

    Raises
    ------
    ParameterError
        When no kind has that name.
    """
    _ensure_builtins()
    try:
        return _REGISTRY[name]
    except KeyError:
        raise ParameterError(f"unknown job kind {name!r} (known: {', '.join(sorted(_REGISTRY))})") from None


def kind_names() -> list[str]:
    """Names of all registered kinds, sorted."""
    _ensure_builtins()
    return sorted(_REGISTRY)
