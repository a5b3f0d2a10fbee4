"""Report pictures: drawing a two-panel quality-against-cost figure to PNG with fixed margins
(what ``loopzoo.report.figures`` does) against matplotlib's constrained layout (reference), on
the same invented points in the same process.

Repeats are interleaved (reference, then candidate, per round); the ratio is the median over
rounds of candidate time / reference time in the same round. Run:

    .venv/bin/python benchmarks/bench_report.py [--rounds 15]
"""

from __future__ import annotations

import argparse
import io
import statistics
import time

import matplotlib
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

# Invented demo points: seven rows with latency (ms), parameter count, mean and interval.
POINTS = [
    (0.021 * (1.4**i), 1950 + 15 * i, 0.05 + 0.01 * ((i * 3) % 7), 0.005 + 0.002 * i)
    for i in range(7)
]


def draw(layout: str | None) -> bytes:
    """One two-panel picture like the report's, rendered to PNG bytes."""
    with matplotlib.rc_context({"font.size": 9}):
        figure = Figure(figsize=(9.0, 4.0), layout=layout)
        if layout is None:
            figure.subplots_adjust(left=0.09, right=0.98, bottom=0.13, top=0.85, wspace=0.3)
        FigureCanvasAgg(figure)
        for column, axes in enumerate(figure.subplots(1, 2)):
            for i, (latency, params, mean, half) in enumerate(POINTS):
                x = latency if column == 0 else params
                axes.errorbar([x], [mean], yerr=[[half], [half]], marker="os^Dv<>"[i],
                              linestyle="none", capsize=3, label=f"row {i}")
                axes.annotate(f"row {i}", (x, mean), textcoords="offset points", xytext=(6, 4))
            axes.set_xscale("log")
            axes.set_xlabel("cost")
            axes.set_ylabel("test metric")
            axes.legend()
        buffer = io.BytesIO()
        figure.savefig(buffer, format="png", metadata={"Software": None})
        return buffer.getvalue()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=15)
    rounds = parser.parse_args().rounds
    draw("constrained"), draw(None)  # warm caches (fonts, tick locators)
    reference, candidate, ratios = [], [], []
    for _ in range(rounds):
        start = time.perf_counter()
        draw("constrained")
        middle = time.perf_counter()
        draw(None)
        end = time.perf_counter()
        reference.append(middle - start)
        candidate.append(end - middle)
        ratios.append((end - middle) / (middle - start))
    print("| layout | median ms per picture | ratio to reference |")
    print("| --- | ---: | ---: |")
    print(f"| constrained layout (reference) | {1000 * statistics.median(reference):.1f} | 1.00 |")
    print(f"| fixed margins (report) | {1000 * statistics.median(candidate):.1f} | "
          f"{statistics.median(ratios):.2f} |")


if __name__ == "__main__":
    main()
