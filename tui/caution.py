"""The caution every result carries, written once: in full where there is room, as one line where not.

A model informs a decision; it does not make it (README.md says the same).
"""

from __future__ import annotations

#: the caution in full: the command line after a table, the setup screen and the help
CAUTION = ("caution: a chain tuned by watching its validation error has seen that error: before anyone "
           "relies on it, check it on data it never saw (the locked test part, or new data), and check for "
           "leakage and drift")
#: the caution in one short line, for the workbench's status bar
CAUTION_LINE = "validate on data the chain never saw; check for leakage and drift"
