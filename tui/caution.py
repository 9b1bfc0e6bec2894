"""The caution every result carries, written once: in full where there is room, as one line where not.

A model informs a decision; it does not make it (README.md says the same), and a model that sets
prices or reserves needs a qualified person's review.
"""

from __future__ import annotations

#: the caution in full: the command line after a table, the setup screen and the help
CAUTION = ("caution: a chain tuned by watching its validation error has seen that error: before anyone "
           "relies on it, check it on data it never saw (the locked test part, or new data), and check for "
           "leakage and drift. A model that sets prices or reserves is subject to the actuarial standards and "
           "regulation where it is used: it must be reviewed by a qualified person; this tool does not replace "
           "that review")
#: the caution in one short line, for the workbench's status bar
CAUTION_LINE = "validate on data the chain never saw; check for leakage and drift"
