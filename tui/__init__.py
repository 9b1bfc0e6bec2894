"""remnant's user interface: the `remnant` command (tui.cli) and the Textual workbench (tui.app)."""

import os

# OpenMP threads (LightGBM's, scikit-learn's) spin while they wait for work by default. In the
# workbench a fit shares the cores with the screen's own thread, and on a busy machine spinning
# threads stall one another: a LightGBM stage fit 30 times slower than with sleeping waits.
# Set before any OpenMP library loads; a user's own setting wins.
os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")
