"""remnant's user interface: the `remnant` command (tui.cli) and the Textual workbench (tui.app)."""
