"""Score the same stream with the exported step graph in onnxruntime: no torch, no loopzoo.

    .venv/bin/python -m loopzoo.cli export examples/demo/artifact --format onnx --out deploy
    .venv/bin/python examples/serve_onnx.py deploy examples/demo/artifact/model.json \\
        examples/demo/readings.csv

Reads the graph's tensor names from ``deploy/export.json`` and the scaling from the artifact's
``model.json``; keeps one state per turbine and feeds each call's next state into the next call.
Its output matches ``score_stream.py`` line for line (to float32 rounding).
"""

from __future__ import annotations

import argparse
import csv
import json
import sys
from pathlib import Path

import numpy as np
import onnxruntime
from turbine_stream import OUTPUT_COLUMNS, AlarmScorer, read_readings, scale


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("export_dir", type=Path, help="directory written by `loopzoo export`")
    parser.add_argument("description", type=Path, help="the artifact's model.json")
    parser.add_argument("readings", help="readings CSV in arrival order")
    parser.add_argument("--alarm", type=float, default=4.0, help="|z| that raises an alarm")
    args = parser.parse_args(argv)
    step = json.loads((args.export_dir / "export.json").read_text())["graphs"]["step"]
    description = json.loads(args.description.read_text())
    metadata = description["metadata"]
    session = onnxruntime.InferenceSession(
        str(args.export_dir / step["file"]), providers=["CPUExecutionProvider"]
    )
    state_shapes = {i.name: i.shape[1] for i in session.get_inputs() if i.name != "x_t"}
    states: dict[str, list[np.ndarray]] = {}
    scorer = AlarmScorer(metadata, args.alarm)
    out = csv.DictWriter(sys.stdout, fieldnames=OUTPUT_COLUMNS, lineterminator="\n")
    out.writeheader()
    for reading in read_readings(args.readings):
        state = states.setdefault(
            reading.turbine,
            [np.zeros((1, width), np.float32) for width in state_shapes.values()],
        )
        x_t = np.asarray([scale(reading.values, metadata)], dtype=np.float32)
        feed = dict(zip(step["inputs"], [x_t, *state], strict=True))
        y_t, *states[reading.turbine] = session.run(step["outputs"], feed)
        out.writerow(scorer.score(reading, float(y_t[0, 0])))
        sys.stdout.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main())
