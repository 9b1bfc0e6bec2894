"""A path prompt in a modal: where to save a chain file or a recipe, or which chain file to open."""

from __future__ import annotations

from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Footer, Input, Label


def default_path(source: str, suffix: str) -> Path:
    """Return ``<data stem><suffix>`` in the current folder, as an absolute path; the home folder
    instead when the current folder is inside remnant's own installation (the demo's data is there)."""
    stem = Path(source).name.split(".")[0] or "chain"
    folder = Path.cwd().resolve()
    if _inside_installation(folder):
        folder = Path.home().resolve()
    return folder / (stem + suffix)


def _inside_installation(folder: Path) -> bool:
    import stages
    import tui

    own = [Path(tui.__file__).resolve().parent, Path(stages.__file__).resolve().parent,
           Path(tui.__file__).resolve().parent.parent / "demo"]
    return any(folder == place or place in folder.parents for place in own)


def path_problem(path: Path, must_exist: bool) -> str:
    """Return why ``path`` cannot be used, or an empty string."""
    if not str(path).strip():
        return "type a file name"
    if path.is_dir():
        return f"{path} is a folder; add a file name"
    if must_exist and not path.exists():
        return f"{path}: no such file"
    if not must_exist and not path.resolve().parent.is_dir():
        return f"folder {path.resolve().parent.name!r} does not exist"
    return ""


class PathPrompt(ModalScreen[Path | None]):
    """Asks for a file path; an existing file is replaced only after a second enter."""

    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def __init__(self, title: str, default: Path, *, must_exist: bool = False) -> None:
        super().__init__()
        self.title_text = title
        self.default = default
        self.must_exist = must_exist
        self._confirmed: Path | None = None

    def compose(self) -> ComposeResult:
        """Return the path input and a line for warnings."""
        with Vertical(id="path-prompt", classes="dialog") as box:
            box.border_title = self.title_text
            yield Input(str(self.default), id="path-input", compact=True)
            hint = "enter opens it (read-only) · escape cancels" if self.must_exist else "enter saves · escape cancels"
            yield Label(hint, id="path-note", classes="dim", markup=False)
        yield Footer(compact=True, show_command_palette=False)

    def on_input_changed(self) -> None:
        """Forget a replace confirmation once the path is edited."""
        self._confirmed = None

    def on_input_submitted(self, event: Input.Submitted) -> None:
        """Dismiss with the path, asking once more before replacing a file."""
        event.stop()
        path = Path(event.value.strip()).expanduser()
        note = self.query_one("#path-note", Label)
        problem = path_problem(path, self.must_exist)
        if problem:
            note.update(problem)
            return
        if not self.must_exist and path.exists() and self._confirmed != path:
            self._confirmed = path
            note.update(f"{path.name} exists: enter again to replace it")
            return
        self.dismiss(path)

    def action_cancel(self) -> None:
        """Close without a path."""
        self.dismiss(None)
