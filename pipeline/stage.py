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
from typing import Any, ClassVar

from vzero.params import Param


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
    registry: Any
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

    def run(self, data: StageInput) -> StageOutput:  # pragma: no cover - abstract
        raise NotImplementedError

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.kind}:{self.method})"


SCOPES = ("plate", "pooled", "final")
