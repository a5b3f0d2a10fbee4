"""Shared test settings: single-threaded torch keeps timings and results stable on small CPUs."""

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")

import torch  # noqa: E402

torch.set_num_threads(1)
