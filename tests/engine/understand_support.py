"""Data sets shipped with statsmodels, for the checks of coefficients and partial dependence.

``grunfeld``: investment of 11 US firms, 1935-1954 (Grunfeld 1958), 220 rows; ``firm`` is a
category. ``fair``: the affairs survey (Fair 1978, Journal of Political Economy 86:45-61),
6,366 rows; the target ``affair`` is 1 when ``affairs > 0``, and ``occupation`` is read as a
category (its codes 1 to 6 name occupations, not amounts).
"""

from __future__ import annotations

import pandas as pd
import statsmodels.api as sm


def grunfeld() -> pd.DataFrame:
    """Return the Grunfeld investment data: invest, value, capital, firm (text), year."""
    return sm.datasets.grunfeld.load_pandas().data


def fair() -> pd.DataFrame:
    """Return the affairs survey with a 0/1 target ``affair`` and ``occupation`` as text."""
    frame = sm.datasets.fair.load_pandas().data.copy()
    frame["affair"] = (frame.pop("affairs") > 0).astype(int)
    frame["occupation"] = frame["occupation"].astype(int).astype(str)
    return frame
