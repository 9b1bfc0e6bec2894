"""Bad weights, exposures and count targets: one clear line from the Python facade and from `remnant fit`.

Each entry of ``corpus.row_setting_entries()`` is the good table with a ``months`` exposure, an
``alarms`` count and a ``w`` weight, broken in one way and fitted with the loss, weight and
exposure the entry names (through ``stages.Chain.from_file`` and through a recipe).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from corpus import row_setting_entries

import stages
import tui.cli
from stages.errors import DataError

DOCS = Path(__file__).resolve().parents[2] / "docs" / "bad-inputs.md"
ENTRIES = [pytest.param(entry, id=entry.name) for entry in row_setting_entries()]


def _recipe(path: Path, settings: dict) -> str:
    data = [f'path = "{path.name}"', f'target = "{settings["target"]}"']
    data += [f'{key} = "{settings[key]}"' for key in ("weight", "exposure") if key in settings]
    return "[data]\n" + "\n".join(data) + f'\n\n[chain]\nloss = "{settings["loss"]}"\n\n[[stage]]\nkind = "glm"\n'


@pytest.mark.parametrize("entry", ENTRIES)
def test_a_bad_weight_exposure_or_count_is_one_clear_error_from_python(entry, tmp_path):
    path = entry.build(tmp_path)
    settings = {k: v for k, v in entry.settings.items() if k != "target"}
    with pytest.raises(DataError) as err:
        stages.Chain.from_file(path, entry.settings["target"], **settings)
    message = str(err.value)
    assert "\n" not in message and all(words in message for words in entry.error), message


@pytest.mark.parametrize("entry", ENTRIES)
def test_a_bad_weight_exposure_or_count_is_one_error_line_from_remnant_fit(entry, tmp_path, capsys):
    path = entry.build(tmp_path)
    recipe = tmp_path / "r.toml"
    recipe.write_text(_recipe(path, entry.settings))
    status = tui.cli.main(["fit", str(recipe), "--out", str(tmp_path / "out.chain")])
    err = capsys.readouterr().err
    assert status == 2, err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and all(w in lines[0] for w in entry.error), err
    assert not (tmp_path / "out.chain").exists()


def test_the_documentation_lists_every_bad_weight_exposure_and_count():
    table = DOCS.read_text(encoding="utf-8")
    for entry in row_setting_entries():
        assert f"| {entry.input} |" in table, entry.input
