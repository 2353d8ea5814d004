"""Benchmark of the compiled Gaussian-mixture fit against scikit-learn's, on one channel group's load.

One first-pass BIC search fits k = 1..8 full-covariance components to the z-scored features of
at most ``fit_events`` events (default 8000, six features). This times that search with
``rigside.core.units.em.fit_em`` and with scikit-learn ``GaussianMixture`` (the
baseline, same seeds and settings) in the same run, as CPU seconds of this process (the machine
may be shared), best of ``--repeat``, and checks that both reach the same BIC.

    python bench/bench_mixture.py [--events 8000] [--repeat 3]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigside.core.signal.chunk_pool import single_threaded_pools  # noqa: E402
from rigside.core.units.em import fit_em, warm_up  # noqa: E402


def group_like(n: int, seed: int = 0) -> np.ndarray:
    """Six features of four invented clusters, one of them heavy-tailed, z-scored."""
    rng = np.random.default_rng(seed)
    centres = rng.normal(0, 4, size=(4, 6))
    which = rng.choice(4, size=n, p=[0.5, 0.25, 0.15, 0.1])
    x = centres[which] + rng.normal(size=(n, 6))
    x[which == 0] += rng.standard_t(3, size=(int(np.sum(which == 0)), 6))
    return (x - x.mean(0)) / x.std(0)


def search(fit, x: np.ndarray) -> tuple[float, list[float]]:
    t = time.process_time()
    bics = [fit(x, k).bic(x) for k in range(1, 9)]
    return time.process_time() - t, bics


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--events", type=int, default=8000)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    from sklearn.mixture import GaussianMixture

    x = group_like(a.events)
    warm_up()

    def ours(z, k):
        return fit_em(z, k, max_iter=200, tol=1e-3, reg_covar=1e-6, random_state=7)

    def library(z, k):
        return GaussianMixture(k, covariance_type="full", max_iter=200, tol=1e-3, reg_covar=1e-6,
                               random_state=7).fit(z)

    with single_threaded_pools():
        t_ours = min(search(ours, x)[0] for _ in range(a.repeat))
        t_lib = min(search(library, x)[0] for _ in range(a.repeat))
        b_ours, b_lib = search(ours, x)[1], search(library, x)[1]
    gap = max(abs(p - q) / abs(q) for p, q in zip(b_ours, b_lib))
    print(f"BIC search k=1..8 on {a.events} events x 6 features (CPU s, best of {a.repeat})")
    print(f"  compiled mixture   {t_ours:7.3f}")
    print(f"  scikit-learn       {t_lib:7.3f}   (baseline)")
    print(f"  speed-up           {t_lib / t_ours:7.2f}x   largest relative BIC difference {gap:.1e}")


if __name__ == "__main__":
    main()
