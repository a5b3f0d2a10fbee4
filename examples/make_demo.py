"""Build the turbine demo: a small generated readings CSV and a model trained on it.

    .venv/bin/python examples/make_demo.py --out examples/demo

writes ``demo/readings.csv`` (two turbines, the second developing a gearbox fault late on) and
``demo/artifact/`` (a hidden-feedback model trained to predict the next vibration reading, with
the feature scaling and the training residual spread in its metadata). The data are invented.
"""

from __future__ import annotations

import argparse
import csv
import io
import math
from pathlib import Path

import torch
from turbine_stream import COLUMNS, FEATURES, TARGET

import loopzoo
from loopzoo import _io

TURBINES = ("T01", "T02")
FAULT_FROM = 0.8  # fraction of the record after which T02's vibration drifts upwards


def simulate(rows_per_turbine: int, seed: int) -> list[dict[str, object]]:
    """Readings of every turbine, interleaved by time: wind-driven rpm, lagged bearing heat."""
    generator = torch.Generator().manual_seed(seed)
    readings = []
    for index, turbine in enumerate(TURBINES):
        noise = torch.randn(rows_per_turbine, 4, generator=generator)
        rpm, temp = 12.0, 45.0
        for t in range(rows_per_turbine):
            gust = 2.0 * math.sin(2 * math.pi * t / 90 + index) + 0.6 * float(noise[t, 0])
            rpm = min(max(rpm + 0.15 * (12.0 + gust - rpm), 0.0), 20.0)
            temp += 0.05 * (35.0 + 1.2 * rpm - temp) + 0.1 * float(noise[t, 1])
            vibration = 0.4 + 0.09 * rpm + 0.01 * (temp - 45.0) + 0.05 * float(noise[t, 2])
            if turbine == "T02" and t > FAULT_FROM * rows_per_turbine:
                vibration += 0.04 * (t - FAULT_FROM * rows_per_turbine) ** 0.8
            readings.append({
                "time_s": 10 * t,
                "turbine": turbine,
                "vibration_mm_s": round(vibration, 4),
                "bearing_temp_c": round(temp, 3),
                "rotor_rpm": round(rpm, 3),
            })
    return sorted(readings, key=lambda r: (r["time_s"], r["turbine"]))


def train(readings: list[dict[str, object]], steps: int, seed: int) -> tuple[torch.nn.Module, dict]:
    """Fit a small Elman network on the healthy first part of every turbine's record."""
    per_turbine = {
        t: torch.tensor([[float(r[f]) for f in FEATURES] for r in readings if r["turbine"] == t])
        for t in TURBINES
    }
    healthy = torch.stack([v[: int(FAULT_FROM * len(v))] for v in per_turbine.values()])
    mean, std = healthy.mean(dim=(0, 1)), healthy.std(dim=(0, 1))
    target_column = FEATURES.index(TARGET)
    x = ((healthy - mean) / std)[:, :-1]
    y = ((healthy - mean) / std)[:, 1:, target_column : target_column + 1]
    torch.manual_seed(seed)
    model = loopzoo.create("hidden-feedback", input_size=len(FEATURES), output_size=1,
                           hidden_size=16)
    optimiser = torch.optim.Adam(model.parameters(), lr=1e-2)
    for _ in range(steps):
        optimiser.zero_grad()
        loss = torch.nn.functional.mse_loss(model(x)[0], y)
        loss.backward()
        optimiser.step()
    model.eval()
    with torch.no_grad():
        residual = (model(x)[0] - y) * std[target_column]
    metadata = {
        "scenario": "turbine gearbox vibration, next reading (generated demo data)",
        "features": list(FEATURES),
        "target": TARGET,
        "feature_mean": mean.tolist(),
        "feature_std": std.tolist(),
        "target_mean": float(mean[target_column]),
        "target_std": float(std[target_column]),
        "residual_std": float(residual.std()),
        "train_mse_scaled": loss.item(),
    }
    return model, metadata


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).parent / "demo")
    parser.add_argument("--rows", type=int, default=240, help="readings per turbine")
    parser.add_argument("--steps", type=int, default=300, help="training steps")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()
    readings = simulate(args.rows, args.seed)
    text = io.StringIO()
    writer = csv.DictWriter(text, fieldnames=COLUMNS, lineterminator="\n")
    writer.writeheader()
    writer.writerows(readings)
    _io.atomic_write_text(args.out / "readings.csv", text.getvalue())
    model, metadata = train(readings, args.steps, args.seed)
    loopzoo.save(model, args.out / "artifact", metadata=metadata)
    print(f"wrote {args.out / 'readings.csv'} ({len(readings)} rows) and {args.out / 'artifact'} "
          f"(residual std {metadata['residual_std']:.4f} mm/s)")


if __name__ == "__main__":
    main()
