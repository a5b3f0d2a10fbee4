"""``loopzoo predict ARTIFACT DATAFILE --out FILE``: a saved model's predictions for a data file.

DATAFILE is a CSV or Parquet file for series and sequence-class artifacts, a UTF-8 text file for
next-symbol artifacts. FILE is written as CSV, atomically, and only when every input is good; bad
input exits with code 2 and one paragraph naming the column or symbol and what the artifact
expects.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

from loopzoo import _io
from loopzoo.serve.artifacts import ArtifactError, load
from loopzoo.serve.predictor import PredictionError

__all__ = ["main"]


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="loopzoo predict",
        description="Predict from raw data with a saved model (artifact directory): forecasts "
        "for series, next-symbol scores for text, labels and probabilities for sequences.",
    )
    parser.add_argument("artifact", help="artifact directory (loopzoo.save, or a run's artifact)")
    parser.add_argument("data", type=Path, help="CSV file (series, sequences) or text file")
    parser.add_argument("--out", required=True, type=Path, help="CSV file for the predictions")
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the predict command; 0 on success, 2 on bad input (nothing written).

    Example: ``main(["runs/x/artifact", "new-rows.csv", "--out", "forecasts.csv"])``.
    """
    try:
        args = _parser().parse_args(argv)
    except SystemExit as exit_:
        return int(exit_.code or 0)
    try:
        if args.out.is_dir():
            raise ValueError(f"--out {str(args.out)!r} is a folder; give a file name")
        predictor = load(args.artifact).predictor
        if predictor.kind == "arrays":
            raise PredictionError(
                f"artifact {args.artifact!r} does not describe its data (no 'preprocessing' in "
                "model.json: it reads model inputs as arrays); predict needs an artifact written "
                "by training on a series, text or sequence task. In Python: "
                "loopzoo.load(ARTIFACT).predictor.predict(array)")
        data = _read_text(args.data) if predictor.kind == "next-symbol" else _read_rows(args.data)
        table = predictor.predict(data, source=str(args.data))
        _io.atomic_write_text(args.out, table.to_csv(index=False))
    except (ArtifactError, PredictionError, ValueError, OSError) as error:
        print(f"loopzoo predict: {error}", file=sys.stderr)
        return 2
    print(f"{args.out}: {len(table)} rows")
    return 0


def _read_rows(path: Path) -> Any:
    from loopzoo.tasks._table import read_table

    return read_table(path)  # the reader training used: CSV or Parquet, errors naming the line


def _read_text(path: Path) -> str:
    from loopzoo.tasks.text_file import read_text

    return read_text(path)[0]  # the text, decoded as training decoded it
