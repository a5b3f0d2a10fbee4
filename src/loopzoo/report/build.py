"""Build the report files of an output directory and the ``loopzoo report DIR`` command."""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable
from pathlib import Path

from loopzoo._io import atomic_write_text
from loopzoo.report.content import TITLE, report_blocks
from loopzoo.report.csv_table import render_csv
from loopzoo.report.html_page import render_html
from loopzoo.report.loading import ReportInputError, load_runs
from loopzoo.report.markdown import render_markdown
from loopzoo.report.summary import EQUIVALENCE_MARGIN, summarise

__all__ = ["build_report", "main"]


def _write(directory: Path, alpha: float, margin: float) -> tuple[tuple[Path, Path, Path], str]:
    runs, skipped = load_runs(directory)
    if not runs:
        detail = "".join(f"\n  skipped {s.source}: {s.reason}" for s in skipped)
        raise ReportInputError(
            f"no usable run records in {str(directory / 'records')!r} "
            f"({len(skipped)} file(s) skipped){detail}"
        )
    summary = summarise(runs, skipped, alpha=alpha, margin=margin)
    blocks = report_blocks(summary)
    markdown = render_markdown(blocks)
    paths = (directory / "report.md", directory / "report.csv", directory / "report.html")
    atomic_write_text(paths[0], markdown)
    atomic_write_text(paths[1], render_csv(summary))
    atomic_write_text(paths[2], render_html(TITLE, blocks))
    return paths, markdown


def build_report(
    directory: str | os.PathLike[str], alpha: float = 0.05, margin: float = EQUIVALENCE_MARGIN
) -> tuple[Path, Path, Path]:
    """Read ``directory/records/*.json`` and write ``report.md``, ``report.csv`` and
    ``report.html`` into ``directory`` (each atomically); returns their paths in that order.

    ``alpha`` is the family-wise significance level of the comparisons with the best row (Holm)
    and the level of the equivalence tests; ``margin`` their relative margin. Raises
    :class:`~loopzoo.report.loading.ReportInputError` (a ValueError) for a missing directory or
    no usable records. Example: ``md, csv, html = build_report("runs/quick")``.
    """
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must lie in (0, 1), got {alpha!r}")
    if not 0.0 < margin < 1.0:
        raise ValueError(f"margin must lie in (0, 1), got {margin!r}")
    return _write(Path(directory), alpha, margin)[0]


def _fraction(name: str) -> Callable[[str], float]:
    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"{name} must be a number in (0, 1), got {text!r}") from None
        if not 0.0 < value < 1.0:
            raise argparse.ArgumentTypeError(f"{name} must lie in (0, 1), got {text!r}")
        return value

    return parse


def main(argv: list[str] | None = None) -> int:
    """``loopzoo report DIR [--alpha A] [--margin M]``: build the report, print its Markdown and
    the HTML path.

    Returns 0 on success and 2 for bad input (missing directory, no usable records, bad option),
    with the reason on stderr.
    """
    parser = argparse.ArgumentParser(
        prog="loopzoo report",
        description="Compare the run records of an output directory (never trains).",
    )
    parser.add_argument("directory", help="output directory holding records/*.json")
    parser.add_argument("--alpha", type=_fraction("alpha"), default=0.05,
                        help="family-wise significance level of the comparisons with the best "
                             "row, Holm-corrected (0.05)")
    parser.add_argument("--margin", type=_fraction("margin"), default=EQUIVALENCE_MARGIN,
                        help="relative margin of the equivalence tests (0.05: within 5%%)")
    try:
        options = parser.parse_args(argv)
    except SystemExit as exit_:
        return 0 if exit_.code == 0 else 2
    try:
        paths, markdown = _write(Path(options.directory), options.alpha, options.margin)
    except ReportInputError as error:
        print(f"loopzoo report: {error}", file=sys.stderr)
        return 2
    print(markdown, end="")
    print(f"\nHTML report: {paths[2]}")
    return 0
