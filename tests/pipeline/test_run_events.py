"""Run-event hooks observe every step; the commands hook adds subcommands."""

from __future__ import annotations

from pathlib import Path

import pytest
from vzero import hookimpl
from vzero.cli.main import Commands
from vzero.errors import StageError
from vzero.manager import make_manager
from vzero.run.runner import run

from tests.conftest import linear_plate


class Recorder:
    def __init__(self) -> None:
        self.events: list[tuple[str, str, str | None]] = []

    @hookimpl
    def vzero_before_step(self, event):
        self.events.append(("before", event.kind, event.plate))

    @hookimpl
    def vzero_after_step(self, event):
        assert event.seconds is not None and event.seconds >= 0 and event.output is not None
        self.events.append(("after", event.kind, event.plate))

    @hookimpl
    def vzero_step_error(self, event):
        self.events.append(("error", event.kind, repr(event.error)))


def test_before_and_after_each_step(tmp_path: Path):
    recorder = Recorder()
    run(linear_plate(tmp_path / "in"), tmp_path / "out", extra_plugins=[("recorder", recorder)])
    assert recorder.events == [
        ("before", "import", "p1"), ("after", "import", "p1"),
        ("before", "blank", "p1"), ("after", "blank", "p1"),
        ("before", "rates", "p1"), ("after", "rates", "p1"),
    ]


def test_step_error_event_and_plugin_named(tmp_path: Path):
    recipe = linear_plate(tmp_path / "in")
    (tmp_path / "in" / "boom.py").write_text(
        "from vzero import hookimpl\nfrom vzero.plugins.kinetics import RateMethod\n\n"
        "class Boom(RateMethod):\n    method = 'boom'\n\n    def kernel(self, time, signal, plate):\n"
        "        raise ZeroDivisionError('no')\n\n@hookimpl\ndef vzero_register(registry):\n"
        "    registry.add(Boom)\n",
        "utf-8",
    )
    text = recipe.read_text("utf-8").replace("name: linear\n", "name: linear\nplugins: [boom.py]\n")
    recipe.write_text(text.replace('{method: window, start: "0 s", end: "300 s"}', "{method: boom}"), "utf-8")
    recorder = Recorder()
    with pytest.raises(StageError, match=r"step 3 \(rates: boom, from local file 0 \(boom.py\)\) failed"):
        run(recipe, tmp_path / "out", extra_plugins=[("recorder", recorder)])
    assert recorder.events[-1][0] == "error" and "ZeroDivisionError" in recorder.events[-1][2]
    assert not (tmp_path / "out").exists()


def test_commands_hook_adds_a_subcommand():
    class Hello:
        @staticmethod
        @hookimpl
        def vzero_commands(commands):
            commands.add("hello", "Say hello.", lambda p: None, lambda args: 0, "vzero hello")

    commands = Commands()
    make_manager(extra=[("hello", Hello)], autoload=False).hook.vzero_commands(commands=commands)
    assert "hello" in commands.items and "demo" in commands.items
