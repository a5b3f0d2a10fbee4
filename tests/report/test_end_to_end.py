"""The report on records the real harness writes: a tiny sweep through the ``loopzoo`` command,
then ``loopzoo report DIR``. Checks the seam: every record is read, no documented field is
missing, and the page carries its pictures. Slow: it trains (a few seconds per run)."""

import csv
import io
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.slow

LOOPZOO = [sys.executable, "-c", "import sys; from loopzoo.cli import main; sys.exit(main())"]


def test_report_reads_real_sweep_records(tmp_path):
    out = tmp_path / "sweep"
    sweep = subprocess.run(
        [*LOOPZOO, "sweep", "model=hidden-feedback,gru", "task=adding", "seed=0,1", f"out={out}",
         "trainer.max_steps=60", "protocol.trials=null", "task.options.length=20"],
        capture_output=True, text=True, timeout=900,
    )
    assert sweep.returncode == 0, sweep.stderr[-2000:]
    report = subprocess.run([*LOOPZOO, "report", str(out)], capture_output=True, text=True,
                            timeout=300)
    assert report.returncode == 0, report.stderr[-2000:]
    assert report.stdout.rstrip().endswith(f"HTML report: {out / 'report.html'}")
    markdown = Path(out / "report.md").read_text()
    # Real records carry every field the report reads: nothing is skipped or missing.
    assert "Skipped files" not in markdown
    assert "Nothing: every run finished ok with its metric, cost and gradient reach." in markdown
    assert "Ship " in markdown or "Only " in markdown  # a verdict names what to ship
    rows = list(csv.DictReader(io.StringIO((out / "report.csv").read_text())))
    topologies = {r["row"]: r for r in rows if r["kind"] == "model"}
    assert set(topologies) == {"hidden-feedback", "gru"}
    for row in topologies.values():
        assert row["n"] == "2" and row["ci95_low"] and row["cost_step_latency_ms"]
        assert row["reach_init_10"]
    assert any(r["kind"] == "baseline" for r in rows)
    assert (out / "report.html").read_text().count("data:image/png;base64,") == 4
