"""The harness: Hydra configs in, Lightning training, one atomic JSON record per run out.

Modules (import the one you need; this package imports nothing heavy by itself):

- ``config``: compose the shipped configs (``loopzoo.conf``), named errors for bad input;
- ``app``: run one job (skip if recorded, train, record, baselines, progress);
- ``sweep``: expand a sweep like Hydra's multirun, check it, launch it;
- ``records``, ``runids``, ``state``: record files, content-derived run ids, locks and progress;
- ``training`` and its helpers: the LightningModule, the fair protocol, costs;
- ``errors``: ``ConfigError`` and ``OutDirError``.
"""

__all__: list[str] = []
