"""One run across two CPU processes (Lightning ddp_spawn, gloo), end to end, in a subprocess:
pytest itself must not host the process group: Lightning's ``ddp`` strategy relaunches the current
command (here pytest) in each child and leaves MASTER_PORT set, so later tests would fail or hang
(seen here with Lightning 2.6; the relaunch is how its DDP strategy starts the processes)."""

import json
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
import torch

SCRIPT = textwrap.dedent(
    """
    import json, sys
    from pathlib import Path

    import torch
    from hydra import compose, initialize_config_module

    from loopzoo.engine.module import SequenceModule
    from loopzoo.engine.training import train_and_evaluate

    # Top level, so spawned workers (which import this file as __mp_main__) run it too: every
    # rank leaves its final weights behind, to show that the ranks stayed in step.
    _hand_off = SequenceModule.on_fit_end

    def _keep_weights(self):
        _hand_off(self)
        rank = self.trainer.global_rank
        torch.save(self.model.state_dict(), Path(sys.argv[1]) / f"rank{rank}.pt")

    SequenceModule.on_fit_end = _keep_weights

    if __name__ == "__main__":
        overrides = [
            "trainer=ddp", "task.options.length=12", "task.options.train_size=256",
            "task.options.val_size=32", "task.options.test_size=32", "task.batch_size=32",
            "task.budget=400", "trainer.max_steps=40", "protocol.val_every=10",
            "protocol.trials=null", "trainer.enable_progress_bar=false", *sys.argv[2:],
        ]
        with initialize_config_module(config_module="loopzoo.conf", version_base="1.3"):
            cfg = compose(config_name="config", overrides=overrides)
        body = train_and_evaluate(cfg, Path(sys.argv[1]) / "run")
        print("BODY " + json.dumps(body))
    """
)


@pytest.mark.slow
@pytest.mark.parametrize("chunk", ["null", "4"])
def test_a_small_run_trains_on_two_processes_and_exits_cleanly(tmp_path: Path, chunk):
    script = tmp_path / "ddp_run.py"
    script.write_text(SCRIPT)
    done = subprocess.run(
        [sys.executable, str(script), str(tmp_path), f"protocol.tbptt_chunk={chunk}"],
        capture_output=True, text=True, timeout=600,
    )
    # Exit code 134 would be the gloo abort at exit when the process group is left alive.
    assert done.returncode == 0, done.stderr[-3000:]
    line = next(x for x in done.stdout.splitlines() if x.startswith("BODY "))
    body = json.loads(line[len("BODY "):])
    assert body["status"] == "ok", body["reason"]
    assert "Starting with 2 processes" in done.stdout + done.stderr
    # The fit state of rank 0 came back to the launching process.
    assert body["cost"]["steps"] == 40
    assert body["curves"]["step"] == [10, 20, 30, 40]
    assert body["metrics"]["test"]["mse"] > 0.0
    assert not (tmp_path / "run" / ".fit-handoff.pt").exists()
    # Gradients were all-reduced: both ranks end with the same weights.
    first, second = (torch.load(tmp_path / f"rank{r}.pt") for r in (0, 1))
    assert all(torch.equal(first[k], second[k]) for k in first)
