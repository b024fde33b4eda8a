"""What a stage method is, and what it receives and returns.

A stage method is a class with class attributes ``kind`` (``import``, ``blank``, ``rates``, ``convert``,
``fit``, ``report`` or a kind of a plugin's own), ``method`` (its name in recipes), ``version``, ``scope``
and ``params`` (a mapping of :class:`vzero.params.Param`), and one method :meth:`Stage.run`.

Like an estimator, a stage stores its validated settings unchanged (``self.settings``) and does its work only
in ``run``, which never mutates its inputs, does no I/O of its own (raw bytes come from the runner through
:class:`StageInput`; files to write go back through :class:`StageOutput`) and returns new artifacts.

``scope`` says how the runner applies it:

* ``"plate"``: once per plate (import, blank, rates, convert): the map of a batch.
* ``"pooled"``: once over the tables of all plates stacked (fit): the reduce.
* ``"final"``: once at the end with every artifact (report); may return files.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, ClassVar

from vzero.errors import PluginError
from vzero.params import Param

if TYPE_CHECKING:  # for annotations only: the registry module imports this one
    from vzero.registry import Registry


@dataclass(frozen=True)
class RawInput:
    """A file that entered the run: the name the recipe used, its bytes, and its sha256 (hex)."""

    key: str
    name: str
    data: bytes
    sha256: str


@dataclass(frozen=True)
class StageInput:
    """Everything a stage may use.

    ``artifacts`` maps names (``traces``, ``rates``, ``fits``, ...) to data containers; ``plate`` is the
    plate's entry from the recipe (``None`` for pooled and final stages); ``inputs`` are the raw files of
    this plate (or of the run), by their recipe key (``data``, ``layout``, ...); ``recipe`` is the whole
    validated recipe mapping (read-only); ``registry`` lets a stage look up components (e.g. fit models);
    ``warn`` records a run warning (stored in the audit file and shown to the user); ``run`` describes the
    run so far for pooled and final stages (``run_id``, ``started``, ``recipe_text``, ``recipe_sha256``,
    ``inputs``: a list of ``{name, key, sha256, size, plates}``, ``warnings``, ``failed``: plate -> error,
    ``steps``: a list of ``{label, plugin, version, seconds}``); empty for plate stages.
    """

    artifacts: Mapping[str, Any]
    plate: Mapping[str, Any] | None
    inputs: Mapping[str, RawInput]
    recipe: Mapping[str, Any]
    registry: Registry | None
    warn: Callable[[str], None]
    run: Mapping[str, Any] = field(default_factory=dict)


@dataclass
class StageOutput:
    """What a stage returns: new or replaced ``artifacts`` and, for final stages, ``files`` to write.

    ``files`` maps a relative path inside the run folder to bytes; the runner writes them atomically with
    the rest of the run. ``record`` holds extra datasets for the step's group in the audit file (name ->
    numpy array or :class:`vzero.data.Table`). ``failed`` names the items the step could not compute
    (for example ``"C7: fit_failed"``): the run goes on, but finishes with exit code 1 and lists them.
    """

    artifacts: dict[str, Any] = field(default_factory=dict)
    files: dict[str, bytes] = field(default_factory=dict)
    record: dict[str, Any] = field(default_factory=dict)
    failed: list[str] = field(default_factory=list)


class Stage:
    """Base class for stage methods. Subclasses set the class attributes and implement :meth:`run`."""

    kind: ClassVar[str]
    method: ClassVar[str]
    version: ClassVar[str] = "0"
    scope: ClassVar[str] = "plate"
    summary: ClassVar[str] = ""
    params: ClassVar[Mapping[str, Param]] = {}
    #: Methods a framework-owned base class keeps for itself: a subclass that overrides one is refused when
    #: it is defined (and again when registered), so no stage method can skip what that base does for every
    #: method of its kind (see :class:`vzero.schema.KindSchema`).
    sealed: ClassVar[tuple[str, ...]] = ()

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        broken = sealed_overrides(cls)
        if broken:
            raise PluginError(broken)

    #: True for the one method of its kind that a recipe step without ``method`` gets.
    default: ClassVar[bool] = False

    def __init__(self, **settings: Any) -> None:
        self.settings = dict(settings)

    @classmethod
    def check_settings(cls, settings: dict[str, Any]) -> list[tuple[str, str]]:
        """Rules that involve several parameters at once, checked with the recipe before anything runs.

        Return ``(parameter, problem)`` pairs (empty when all is well). The default has no such rules.
        """
        return []

    def preflight(self, data: StageInput) -> StageOutput | None:
        """Check, before any stage runs, what :meth:`run` would reject at its start; no side effects.

        Called once per plate for every plate-scoped step, in recipe order, by ``vzero check`` and by the
        runner before a plate's first step. ``data.inputs`` holds the plate's raw files and
        ``data.artifacts`` what the earlier steps' preflights returned (the import step returns
        ``layout``, one row per analysed well, and ``well_units``). Raise a :class:`vzero.errors.VzeroError`
        for what would stop the run, call ``data.warn`` for what it would warn about, and return artifacts
        later checks need (or None). The default checks nothing.
        """
        return None

    def run(self, data: StageInput) -> StageOutput:  # pragma: no cover - abstract
        raise NotImplementedError

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.kind}:{self.method})"


SCOPES = ("plate", "pooled", "final")


def sealed_overrides(cls: type) -> str:
    """Why ``cls`` breaks a base class's ``sealed`` methods ('' when it does not)."""
    mro = cls.__mro__
    for i, base in enumerate(mro[1:], start=1):
        for name in base.__dict__.get("sealed", ()):
            culprits = [k.__qualname__ for k in mro[:i] if name in k.__dict__]
            if culprits:
                return (f"stage {cls.__qualname__} (module {cls.__module__}): {culprits[0]} overrides "
                        f"{name}(), which {base.__qualname__} owns; implement the method {base.__qualname__} "
                        f"asks for instead (see its docstring)")
    return ""
