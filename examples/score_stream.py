"""Score a live-ordered stream of turbine readings with a saved model, one reading at a time.

    .venv/bin/python examples/score_stream.py examples/demo/artifact examples/demo/readings.csv

Prints one CSV line per reading as it is scored (``time_s, turbine, vibration_mm_s,
predicted_next, z, alarm``): each turbine is its own stream in a ``StreamRunner``, so its state
follows only its own readings. Uses only loopzoo's public API (``loopzoo.load``,
``loopzoo.serve.read_description``, ``loopzoo.serve.StreamRunner``).
"""

from __future__ import annotations

import argparse
import csv
import sys

from turbine_stream import OUTPUT_COLUMNS, AlarmScorer, read_readings, scale

import loopzoo
from loopzoo.serve.artifacts import read_description
from loopzoo.serve.streaming import StreamRunner


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("artifact", help="artifact directory written by loopzoo.save")
    parser.add_argument("readings", help="readings CSV in arrival order")
    parser.add_argument("--alarm", type=float, default=4.0, help="|z| that raises an alarm")
    args = parser.parse_args(argv)
    model = loopzoo.load(args.artifact)
    metadata = read_description(args.artifact)["metadata"]
    runner = StreamRunner(model)
    scorer = AlarmScorer(metadata, args.alarm)
    out = csv.DictWriter(sys.stdout, fieldnames=OUTPUT_COLUMNS, lineterminator="\n")
    out.writeheader()
    started: set[str] = set()
    for reading in read_readings(args.readings):
        if reading.turbine not in started:  # a turbine seen for the first time: a new stream
            runner.start(reading.turbine)
            started.add(reading.turbine)
        prediction = runner.push(reading.turbine, scale(reading.values, metadata))
        out.writerow(scorer.score(reading, float(prediction[0])))
        sys.stdout.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main())
