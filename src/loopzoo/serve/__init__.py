"""Serving a trained model: artifacts (save / load), the multi-stream runner, the predictor.

Needs only torch, numpy and safetensors (pandas for reading prediction files); never the training
stack or the report.
"""

from loopzoo.serve.artifacts import ArtifactError, load, read_description, save
from loopzoo.serve.predictor import PredictionError, Predictor
from loopzoo.serve.streaming import StreamRunner

__all__ = ["ArtifactError", "PredictionError", "Predictor", "StreamRunner", "load",
           "read_description", "save"]
