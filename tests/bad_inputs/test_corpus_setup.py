"""Every bad input of the corpus through the workbench: ``remnant explore FILE --target y``, then start.

An input the app cannot read is one ``error:`` line on stderr and status 2 before any screen
(``tui.app.run``); an input it reads but cannot build a chain from is one line in a modal over
the setup screen, which stays; a handled input reaches the main screen with its documented note
in the start value's details. Never a traceback.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from corpus import build_corpus, pytest_params

from stages.errors import RemnantError
from tui.app import build_app, run
from tui.screens.failure import FailureScreen
from tui.screens.setup import SetupScreen
from tui.screens.workbench import WorkbenchScreen


@pytest.fixture(scope="module")
def corpus_files(tmp_path_factory) -> dict[str, Path]:
    """Return the path of every corpus entry, built once for this module."""
    return build_corpus(tmp_path_factory.mktemp("corpus_setup"))


@pytest.fixture(autouse=True)
def home(tmp_path, monkeypatch) -> Path:
    """Point REMNANT_HOME at a fresh folder: the workbench saves sessions."""
    monkeypatch.setenv("REMNANT_HOME", str(tmp_path / "home"))
    return tmp_path / "home"


def words_in(message: str, words: tuple[str, ...]) -> bool:
    """Return True when every one of ``words`` is in ``message``."""
    return all(w in message for w in words)


async def start_on(app) -> dict:
    """Run ``app`` (on the setup screen), press start; return the screen it lands on and its state."""
    async with app.run_test(size=(100, 30)) as pilot:
        await pilot.pause()
        assert isinstance(app.screen, SetupScreen)
        for _ in range(500):  # the screen reads the columns and the target's task in a worker first
            await app.workers.wait_for_complete()
            await pilot.pause()
            if not app.answering:
                break
        await pilot.press("s")
        await pilot.pause()
        await app.workers.wait_for_complete()
        for _ in range(3):
            await pilot.pause()
        screen = app.screen
        found = {"screen": screen, "reason": getattr(screen, "reason", None),
                 "below": app.screen_stack[-2] if len(app.screen_stack) > 1 else None}
        if isinstance(screen, WorkbenchScreen):
            found["details"] = str(screen.query_one("#details-body").render())
            found["view"] = screen.view
            found["rows"] = len(screen.chain.y)
        await pilot.press("escape")
    return found


@pytest.mark.parametrize("entry", pytest_params())
async def test_each_bad_input_through_the_workbench(entry, corpus_files, capsys):
    path = corpus_files[entry.name]
    try:
        app = build_app(data_path=str(path), target=entry.target, timings=False)
    except RemnantError:
        # refused before any screen: what `remnant explore` prints
        assert run(data_path=str(path), target=entry.target) == 2
        err = capsys.readouterr().err
        assert err.startswith("error: ") and err.count("\n") == 1, err
        assert entry.is_error and words_in(err, entry.error), err
        assert "Traceback" not in err
        return
    found = await start_on(app)
    if entry.is_error:
        assert isinstance(found["screen"], FailureScreen), found["screen"]
        assert found["reason"] and "\n" not in found["reason"]
        assert words_in(found["reason"], entry.error), found["reason"]
        assert isinstance(found["below"], SetupScreen)  # the setup screen stays, to change the choice
        return
    assert isinstance(found["screen"], WorkbenchScreen), found["reason"]
    view = found["view"]
    assert len(view.features) == entry.features and found["rows"] == entry.rows
    if entry.note:
        # the note is on screen: the start value's details list the notes
        assert any(words_in(line, entry.note) for line in found["details"].splitlines()), found["details"]
