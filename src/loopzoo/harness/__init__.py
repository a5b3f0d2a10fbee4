"""The harness: Hydra configs in, the engine trains, one atomic JSON record per run out.

Modules (import the one you need; this package imports nothing heavy by itself):

- ``config``: compose the shipped configs (``loopzoo.conf``), named errors for bad input;
- ``app``: run one job (skip if recorded, train, record, baselines, progress);
- ``sweep``: expand a sweep like Hydra's multirun, check it, launch it;
- ``records``, ``runids``, ``state``: record files, content-derived run ids, locks and progress;
- ``running``: the running jobs' progress files and the sweep's display of them;
- ``errors``: ``ConfigError`` (from ``loopzoo.engine.errors``) and ``OutDirError``.

Training itself lives in ``loopzoo.engine``.
"""

__all__: list[str] = []
