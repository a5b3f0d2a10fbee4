"""The training engine: fit one topology on one task under the fair protocol, without Hydra.

Modules (import the one you need; this package imports nothing heavy by itself):

- ``training``: the protocol (width from the budget, learning-rate probes, early stopping, one
  test evaluation) and ``train_and_evaluate``, which returns a run's record body;
- ``settings``: ``read_settings`` checks a composed config into ``RunSettings``;
- ``module``: the LightningModule; ``lightning_setup``: a quiet Lightning ``Trainer``;
- ``progress``: a fit's progress display (a live bar, or a few plain lines off a terminal);
- ``data``, ``evaluation``, ``objectives``, ``optimizers``, ``schedules``, ``tbptt``, ``costs``:
  batches, scoring, losses, optimiser factories, teacher-forcing schedules, truncated BPTT,
  time and memory;
- ``errors``: ``ConfigError``; ``provenance``: time stamps and library versions.
"""

__all__: list[str] = []
