"""The ``loopzoo`` command: list, train, sweep, report, export, predict.

    loopzoo list
    loopzoo options task=csv
    loopzoo train model=stacked task=adding seed=1 out=runs/try
    loopzoo sweep suite=quick out=runs/quick
    loopzoo sweep model=lstm,gru task=copy seed=1,2,3 out=runs/copy
    loopzoo report runs/quick
    loopzoo export ...
    loopzoo predict runs/quick/runs/<run_id>/artifact new-rows.csv --out forecasts.csv

Hydra overrides (``key=value``; comma lists are swept by ``sweep``) follow the subcommand.
Bad input exits with code 2 and a one-paragraph message, never a traceback.
"""

from __future__ import annotations

import errno
import sys
from collections.abc import Callable
from importlib import import_module

__all__ = ["main", "SUBCOMMANDS"]

USAGE = """usage: loopzoo <command> [key=value ...]

commands:
  list                      topologies, tasks, suites and sweep launchers, one line each
  options task=NAME | model=NAME
                            a task's or topology's options: value, accepted values, meaning
  train key=value ...       one run (model=, task=, seed=, out=, trainer.max_steps=, optim.lr=, ...)
  sweep key=a,b ...         a sweep (suite=NAME or comma lists), one record per run, resumable
  report DIR                report.md / .csv / .html from the records under DIR
  export ...                export a trained model (loopzoo export --help)
  predict ARTIFACT DATA --out FILE   predictions in data units from raw data (--help)

Options of a run: the config groups under loopzoo/conf (model, task, trainer, optim, protocol,
suite, hydra/launcher); `loopzoo options task=NAME` lists a task's (set them with
task.options.NAME=VALUE). Example: loopzoo sweep suite=quick out=runs/quick
"""


def _first_line(obj: object) -> str:
    doc = (getattr(obj, "__doc__", None) or "").strip()
    return doc.splitlines()[0].rstrip(".") if doc else ""


def _list(argv: list[str]) -> int:
    import loopzoo
    from loopzoo.harness.shipped import description, shipped_options
    from loopzoo.tasks import TASKS
    from loopzoo.topologies import TOPOLOGIES

    if argv:
        return _fail(f"list takes no arguments, got {' '.join(argv)}")
    sections = [
        ("topologies (model=)", [(n, _first_line(TOPOLOGIES.get(n))) for n in loopzoo.available()]),
        ("tasks (task=)", [(n, _first_line(TASKS.get(n))) for n in loopzoo.tasks.available()]),
        ("suites (suite=)", [(n, description("suite", n)) for n in shipped_options("suite")]),
        ("sweep launchers (hydra/launcher=)",
         [(n, description("hydra/launcher", n)) for n in shipped_options("hydra/launcher")]),
    ]
    for title, rows in sections:
        print(title)
        for name, line in rows:
            print(f"  {name:<18} {line}")
    return 0


def _options(argv: list[str]) -> int:
    import loopzoo
    from loopzoo._registry import unknown_choice
    from loopzoo.harness.option_help import model_options, render, task_options

    listers = {"task": (loopzoo.tasks.available, task_options),
               "model": (loopzoo.available, model_options)}
    if not argv:
        return _fail("options needs task=NAME or model=NAME, e.g. loopzoo options task=csv")
    for argument in argv:
        group, _, name = argument.partition("=")
        if group not in listers or not name:
            return _fail(f"options takes task=NAME or model=NAME, got {argument!r}")
        names, rows = listers[group]
        if name not in names():
            return _fail(str(unknown_choice(group, name, names())))
        print(render(group, name, rows(name)))
    return 0


_FILE_SYSTEM_HINTS = {
    errno.ENOSPC: "the disk is full: free some space and run the same command again (finished "
                  "runs are kept, nothing is half written)",
    errno.EDQUOT: "the disk quota is used up: free some space and run the same command again",
    errno.EROFS: "the file system is read-only: choose a writable folder",
    errno.EACCES: "permission denied: choose a folder you may write in",
    errno.EPERM: "permission denied: choose a folder you may write in",
    errno.ENOTDIR: "a part of the path is a file, not a folder: choose another path",
    errno.EISDIR: "the path is a folder where a file was expected: choose another path",
}


def _file_system_message(error: OSError) -> str:
    """One paragraph: what could not be written or read, and what to do."""
    where = f" ({error.filename})" if error.filename else ""
    hint = _FILE_SYSTEM_HINTS.get(error.errno, "check the path and the disk")
    return f"{error.strerror or error}{where}: {hint}"


def _fail(message: str) -> int:
    print(f"loopzoo: error: {message}", file=sys.stderr)
    return 2


def _train(argv: list[str]) -> int:
    from loopzoo.harness.app import run_one
    from loopzoo.harness.config import compose_job, composer, parse_overrides
    from loopzoo.harness.records import check_out_dir, record_path

    swept = [o.input_line for o in parse_overrides(argv) if o.is_sweep_override()]
    if swept:
        return _fail(f"train runs one config; use 'loopzoo sweep' for {' '.join(swept)}")
    with composer():
        cfg = compose_job(argv)
    check_out_dir(cfg.out, cfg.suite)
    outcome = run_one(cfg)
    print(f"{outcome.run_id}: {outcome.status} in {outcome.seconds:.1f} s"
          + (f" ({outcome.reason})" if outcome.reason else ""))
    print(f"record: {record_path(cfg.out, outcome.run_id)}")
    return 1 if outcome.status == "failed" else 0


def _sweep(argv: list[str]) -> int:
    from loopzoo.harness.sweep import run_sweep

    return run_sweep(argv)


def _delegate(module: str, purpose: str) -> Callable[[list[str]], int]:
    def run(argv: list[str]) -> int:
        try:
            entry = import_module(module).main
        except (ImportError, AttributeError) as error:
            return _fail(f"{purpose} is not available in this installation ({module}: {error})")
        return int(entry(argv) or 0)

    return run


SUBCOMMANDS: dict[str, Callable[[list[str]], int]] = {
    "list": _list,
    "options": _options,
    "train": _train,
    "sweep": _sweep,
    "report": _delegate("loopzoo.report", "the report"),
    "export": _delegate("loopzoo.export", "export"),
    "predict": _delegate("loopzoo.serve.predict_cli", "predict"),
}


def main(argv: list[str] | None = None) -> int:
    """Run the ``loopzoo`` command on ``argv`` (default ``sys.argv[1:]``); return the exit code."""
    from loopzoo._registry import unknown_choice

    argv = list(sys.argv[1:] if argv is None else argv)
    if not argv or argv[0] in ("-h", "--help", "help"):
        print(USAGE, end="")
        return 0 if argv else 2
    command, rest = argv[0], argv[1:]
    if command not in SUBCOMMANDS:
        return _fail(str(unknown_choice("command", command, list(SUBCOMMANDS))))
    if command in ("train", "sweep") and any(a in ("-h", "--help") for a in rest):
        print(USAGE, end="")
        return 0
    try:
        return SUBCOMMANDS[command](rest)
    except KeyboardInterrupt:
        print("loopzoo: interrupted; run the same command again to finish (finished runs are "
              "kept)", file=sys.stderr)
        return 130
    except OSError as error:  # the file system refused: a full disk, a read-only or file path
        return _fail(_file_system_message(error))
    except ValueError as error:  # ConfigError, OutDirError and the zoo's own argument checks
        from loopzoo.harness.errors import ConfigError, OutDirError

        if isinstance(error, ConfigError | OutDirError) or command in ("train", "sweep"):
            return _fail(str(error))
        raise


if __name__ == "__main__":
    sys.exit(main())
