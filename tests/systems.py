"""Random test systems shared by the model-core tests."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, settings
from scipy import linalg, stats

from ident.lti.models import StateSpaceModel

# derandomize: the same examples on every run (reproducible CI); seeds were varied by hand
SETTINGS = settings(
    max_examples=25, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow]
)


def random_stable(seed: int, n: int, m: int, p: int, sample_time: float | None = None) -> StateSpaceModel:
    """Random stable model with well-separated poles and a mild similarity transform.

    Continuous poles: real in [-5, -0.2], pairs with real part in [-3, -0.1] and
    imaginary part in [0.2, 5]; a discrete model gets z = exp(s T).
    """
    rng = np.random.default_rng(seed)
    blocks, k = [], 0
    while k < n:
        if n - k >= 2 and rng.random() < 0.5:
            sig, om = -rng.uniform(0.1, 3.0), rng.uniform(0.2, 5.0)
            blocks.append(np.array([[sig, om], [-om, sig]]))
            k += 2
        else:
            blocks.append(np.array([[-rng.uniform(0.2, 5.0)]]))
            k += 1
    J = linalg.block_diag(*blocks)
    Q = stats.ortho_group.rvs(n, random_state=rng) if n > 1 else np.eye(1)
    T = Q @ np.diag(rng.uniform(0.5, 2.0, n))
    A = T @ J @ np.linalg.inv(T)
    if sample_time is not None:
        A = linalg.expm(A * sample_time)
    return StateSpaceModel(
        A=A,
        B=rng.standard_normal((n, m)),
        C=rng.standard_normal((p, n)),
        D=rng.standard_normal((p, m)) * rng.integers(0, 2),
        sample_time=sample_time,
    )
