"""Hydra configuration groups shipped with loopzoo."""
