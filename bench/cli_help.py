"""``remnant --help`` against ``python -c pass``: wall time of a fresh process, best of 5.

The command line must answer in under half a second: it imports scikit-learn and LightGBM only
when a command needs them. Run as ``python -m tui.cli`` with this interpreter, so the figure does
not depend on which ``remnant`` is first on the PATH.

    python bench/cli_help.py [--repeats N]
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent


def wall(command: list[str], repeats: int) -> float:
    """Return the best wall time of ``repeats`` runs of ``command``, in seconds."""
    def run() -> None:
        subprocess.run(command, cwd=ROOT, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)

    return common.best_of(run, repeats)


def main() -> None:
    """Print the figure."""
    parse = common.parser(__doc__.splitlines()[0], 0)
    parse.add_argument("--repeats", type=int, default=5)
    args = parse.parse_args()
    bare = wall([sys.executable, "-c", "pass"], args.repeats)
    ours = wall([sys.executable, "-m", "tui.cli", "--help"], args.repeats)
    common.print_table("command line", [
        ("remnant --help", f"{ours:.3f} s", f"{bare:.3f} s (python -c pass)",
         f"{ours / bare:.1f}x; {ours:.2f} s (under 0.5 s)"),
    ])


if __name__ == "__main__":
    main()
