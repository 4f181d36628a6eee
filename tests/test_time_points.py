"""Time labels stored in gloam.h5ad keep time order (AnnData ``obs["time_point"]``).

Source: pandas ordered ``Categorical`` semantics (categories compare and sort in the given
order), as documented in the pandas user guide, "Categorical data".
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from gloam.stages import time_point_categories


def test_categories_follow_numeric_time_not_text_order():
    times = np.array([0.0, 0.5, 2.0, 12.0, 24.0, 0.0, 0.5, 2.0, 12.0, 24.0])
    labels = time_point_categories(times, "h")
    assert labels.ordered
    assert list(labels.categories) == ["0 h", "0.5 h", "2 h", "12 h", "24 h"]
    # Text order would put "12 h" before "2 h"; the ordered categorical does not.
    assert sorted(["12 h", "2 h"]) == ["12 h", "2 h"]
    assert (labels.codes[:5] == np.arange(5)).all() and (labels.codes[5:] == np.arange(5)).all()
    ordered = pd.Series(labels).sort_values(kind="stable")
    assert ordered.iloc[:4].tolist() == ["0 h", "0 h", "0.5 h", "0.5 h"]
    assert ordered.tolist()[-2:] == ["24 h", "24 h"]
