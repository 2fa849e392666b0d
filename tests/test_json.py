import json
import math
from pathlib import Path

import numpy as np

from ident._json import json_ready


def test_json_ready_converts_numpy_and_non_finite_values():
    data = {
        1: np.array([1.0, np.nan, np.inf]),
        "n": np.int64(3),
        "flag": np.bool_(True),
        "z": np.complex128(1 - 2j),
        "t": (np.float32(0.5), [math.inf]),
        "p": Path("a/b.csv"),
    }
    out = json_ready(data)
    # JSON has no NaN/inf (RFC 8259): they become null; everything must dump with allow_nan=False
    assert json.loads(json.dumps(out, allow_nan=False)) == {
        "1": [1.0, None, None], "n": 3, "flag": True, "z": [1.0, -2.0], "t": [0.5, [None]], "p": "a/b.csv",
    }
