"""scikit-learn's bundled 8x8 digit images read as sequences (rows or pixels), 10 classes."""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from loopzoo._checks import choice
from loopzoo.tasks._base import SPLITS, Split, split_generators
from loopzoo.tasks._catalog import TASKS
from loopzoo.tasks._options import check_split_fractions
from loopzoo.tasks._sequence_classes import SequenceClassTask, encode_sequences, stratified_parts

__all__ = ["DigitsTask"]


@dataclasses.dataclass(frozen=True)
class DigitsOptions:
    read: str = "rows"  # "rows": 8 steps of 8 pixels; "pixels": 64 steps of 1 pixel
    val_fraction: float = 0.2  # share of each class, drawn with the seed
    test_fraction: float = 0.2  # share of each class held out for the test, drawn with the seed

    def __post_init__(self) -> None:
        choice("read", self.read, ["rows", "pixels"])
        check_split_fractions(self.val_fraction, self.test_fraction)


@TASKS.register("digits")
class DigitsTask(SequenceClassTask):
    """Classify a handwritten digit read row by row (or pixel by pixel).

    Data: sklearn.datasets.load_digits (1,797 images of 8x8, values 0-16; UCI optical digits).
    Pixels are divided by 16 (a fixed range, so nothing is fitted). The parts are a stratified
    draw with the seed. Shapes: x (N, 8, 8) or (N, 64, 1), y (N, T) with the class at every
    step, only the last step scored. Baselines "logistic" and "prior".

    Example:
        >>> task = loopzoo.tasks.create("digits", read="pixels", seed=1)
    """

    name = "digits"
    Options = DigitsOptions
    output_size = 10

    def __init__(self, seed: int = 0, **options: Any) -> None:
        super().__init__(seed, **options)
        self.input_size = 8 if self.options.read == "rows" else 1

    def _make_splits(self) -> dict[str, Split]:
        from sklearn.datasets import load_digits

        digits = load_digits()
        images = digits.images.astype(np.float64) / 16.0  # (1797, 8, 8)
        sequences = images if self.options.read == "rows" else images.reshape(-1, 64, 1)
        rng = split_generators(self.name, self.seed)["train"]
        parts = stratified_parts(digits.target, {"val": self.options.val_fraction,
                                                 "test": self.options.test_fraction}, rng)
        return {name: encode_sequences(list(sequences[parts[name]]), digits.target[parts[name]],
                                       np.stack([parts[name], parts[name]], axis=1))
                for name in SPLITS}

    def preprocessing(self) -> dict[str, Any]:
        """Pixels (0-16) divided by 16; a table of pixel columns is one image, row by row."""
        features = ([f"pixel_{i}" for i in range(1, 9)] if self.options.read == "rows"
                    else ["pixel"])
        return {"kind": "sequence-classes", "features": features, "sequence": None,
                "time": None, "label": None, "classes": [str(c) for c in range(10)],
                "input_scaling": {"mean": [0.0] * len(features), "std": [16.0] * len(features)}}

    def _facts(self) -> dict[str, Any]:
        return {"source": "sklearn.datasets.load_digits", "images": 1797,
                "scaling": "pixel / 16 (fixed range 0-16)"}
