"""Why the task baselines fit with one BLAS thread: the same fits with the BLAS thread count
left at its default, interleaved, as a ratio of medians per round.

    .venv/bin/python benchmarks/bench_task_baselines.py --rounds 7

Fits: scikit-learn LogisticRegression (the digits "logistic" baseline: 1,079 training images of
64 pixels) and statsmodels AutoReg orders 1-12 (the sunspots "ar" order choice).
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
from sklearn.datasets import load_digits
from sklearn.linear_model import LogisticRegression
from statsmodels.datasets import sunspots
from statsmodels.tsa.ar_model import AutoReg
from threadpoolctl import threadpool_info, threadpool_limits


def logistic_fit(images: np.ndarray, labels: np.ndarray) -> None:
    LogisticRegression(max_iter=5000).fit(images, labels)


def ar_fits(series: np.ndarray) -> None:
    for order in range(1, 13):
        AutoReg(series, lags=order, trend="c").fit()


def timed(work, limit: int | None) -> float:
    with threadpool_limits(limits=limit):
        start = time.perf_counter()
        work()
        return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=7)
    args = parser.parse_args()
    digits = load_digits()
    images, labels = digits.data[:1079] / 16.0, digits.target[:1079]
    series = sunspots.load_pandas().data["SUNACTIVITY"].to_numpy()[:216]
    jobs = {"LogisticRegression fit (digits)": lambda: logistic_fit(images, labels),
            "AutoReg orders 1-12 (sunspots)": lambda: ar_fits(series)}
    threads = max(pool["num_threads"] for pool in threadpool_info())
    print(f"BLAS default threads: {threads}; rounds: {args.rounds}")
    print("| fit | one thread, median s | default threads, median s | ratio (default / one) |")
    print("| --- | ---: | ---: | ---: |")
    for name, work in jobs.items():
        work()  # warm-up
        one, default, ratios = [], [], []
        for _ in range(args.rounds):
            a = timed(work, 1)
            b = timed(work, None)
            one.append(a)
            default.append(b)
            ratios.append(b / a)
        print(f"| {name} | {statistics.median(one):.3f} | {statistics.median(default):.3f} | "
              f"{statistics.median(ratios):.1f} |")


if __name__ == "__main__":
    main()
