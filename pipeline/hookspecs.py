"""The whole plugin contract of vzero: every hook a plugin may implement.

A plugin is a module (or object) with functions named like the hooks below, marked with
``from vzero import hookimpl``. It is found in one of three ways:

* an installed distribution declaring an entry point in the group ``vzero.plugins`` (the built-in stages
  come this way too, from vzero's own pyproject.toml);
* a Python file or importable module named in a recipe: ``plugins: [my_rates.py]``;
* (tests) passed directly to :func:`vzero.manager.make_manager`.

Hooks are grouped by phase. Hooks *observe* or *register*; they never decide the order of stages, which
comes from the recipe alone. Run events take one context object, so that new information arrives as a new
attribute and existing plugins keep working.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

import pluggy
from vzero.meta import PROJECT

if TYPE_CHECKING:  # for annotations only: these modules import this one through the plugin manager
    from vzero.cli.main import Commands
    from vzero.registry import Registry
    from vzero.run.steps import StepEvent

hookspec = pluggy.HookspecMarker(PROJECT)


# -- registration ---------------------------------------------------------------------------------------


@hookspec
def vzero_register(registry: Registry) -> None:
    """Add this plugin's components to ``registry`` (a :class:`vzero.registry.Registry`).

    Called once per plugin when the plugin manager is built. Call ``registry.add(component)`` for each stage
    method class (a :class:`vzero.stage.Stage` subclass) and for other named components, such as a fit
    model or the output schema of a step kind (any object with ``kind`` and ``name`` attributes;
    :class:`vzero.schema.KindSchema` for a schema). A name already taken is an error naming both plugins.
    The registry records the plugin, its distribution and version for the audit file. A stage method of a
    kind whose schema names a base class must derive from it (the built-in kinds: docs/schemas.md); the
    base class of the built-in rates kind owns ``run`` and a rates method writes only its kernel.

    Example::

        from vzero import hookimpl
        from vzero.plugins.kinetics import RateMethod, RateResult

        class FirstReads(RateMethod):
            method, version = "first-reads", "1.0"

            def kernel(self, time, signal, plate):
                return RateResult(v0=(signal[:, 4] - signal[:, 0]) / (time[4] - time[0]))

        @hookimpl
        def vzero_register(registry):
            registry.add(FirstReads)
    """


@hookspec
def vzero_commands(commands: Commands) -> None:
    """Add command-line subcommands: ``commands.add(name, help, configure, run)``.

    ``configure(parser)`` adds arguments to an :class:`argparse.ArgumentParser`; ``run(args) -> int``
    executes the command and returns its exit code. Called only when the command line is built, so keep
    the plugin module's top-level imports light.

    Example::

        @hookimpl
        def vzero_commands(commands):
            commands.add("hello", "Say hello.", lambda p: None, lambda args: print("hello") or 0)
    """


@hookspec
def vzero_check_recipe(recipe: Mapping[str, Any], where: Callable[[tuple[Any, ...]], str],
                       plates: Sequence[str]) -> list[str]:
    """Validate the parts of a recipe that a plugin owns beyond its step parameters.

    Called once per recipe, after every step has been checked and before anything runs. ``recipe`` is the
    parsed recipe mapping (read-only); ``plates`` the names of the run's plates (globs and manifests
    expanded); ``where(path)`` turns a key path tuple such as
    ``("exclusions", 0, "reason")`` into ``"recipe.yaml:31 exclusions[0].reason"``. Return one message per
    problem (an empty list when all is well); they are reported together with every other recipe problem.

    Example::

        @hookimpl
        def vzero_check_recipe(recipe, where):
            assay = recipe.get("assay", {})
            return [] if "temperature" in assay else [f"{where(('assay',))}: give the temperature"]
    """
    raise NotImplementedError  # a specification: pluggy calls the plugins' implementations, never this


# -- run events (observers) -----------------------------------------------------------------------------


@hookspec
def vzero_before_step(event: StepEvent) -> None:
    """Called before a step runs (once per plate for plate-scoped steps).

    ``event`` is a :class:`vzero.run.steps.StepEvent` with ``index``, ``kind``, ``method``, ``plate``
    (``None`` for pooled and final steps), ``settings`` and ``run_id``. Return value ignored.

    Example::

        @hookimpl
        def vzero_before_step(event):
            print(f"starting {event.kind}:{event.method} on {event.plate}")
    """


@hookspec
def vzero_after_step(event: StepEvent) -> None:
    """Called after a step succeeded; ``event.seconds`` holds its duration and ``event.output`` the
    :class:`vzero.stage.StageOutput`. Observers must not change the output.

    Example::

        @hookimpl
        def vzero_after_step(event):
            log.info("%s took %.3f s", event.method, event.seconds)
    """


@hookspec
def vzero_step_error(event: StepEvent) -> None:
    """Called when a step raised; ``event.error`` holds the exception. The run then stops for this plate
    (the batch goes on with the others). Return value ignored.

    Example::

        @hookimpl
        def vzero_step_error(event):
            alert(f"{event.plate}: {event.error}")
    """
