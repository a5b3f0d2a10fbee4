"""A fit's progress display: a few plain lines off a terminal, one redrawn bar on one."""

import io

from loopzoo.engine.progress import ConsoleProgress, FitProgress, Snapshot
from loopzoo.engine.training import train_and_evaluate


class Terminal(io.StringIO):
    """A stream that says it is a terminal (of unknown size, as some ptys report)."""

    def isatty(self):
        return True


def snapshot(step, val=None, best=None):
    return Snapshot(step=step, max_steps=100, loss=0.5, val=val, best=best, metric="mse",
                    seconds=1.0)


def feed(view, steps=100, val_every=10):
    view.start(snapshot(0))
    for step in range(1, steps + 1):
        validated = step % val_every == 0
        view.update(snapshot(step, val=0.25, best=0.2), validated=validated)
    view.finish(snapshot(steps, val=0.25, best=0.2), "step_cap")


def test_off_a_terminal_a_start_line_an_end_line_and_validations_at_most_every_few_seconds():
    quiet = io.StringIO()
    feed(ConsoleProgress("gru adding seed=0", stream=quiet, every=3600.0))
    lines = quiet.getvalue().splitlines()
    assert lines == [
        "gru adding seed=0: training, at most 100 steps",
        "gru adding seed=0: step_cap, step 100/100, loss 0.5, val mse 0.25 (best 0.2), 1.0 s",
    ]
    # With no rate limit it writes a line per validation, never one per update.
    every = io.StringIO()
    feed(ConsoleProgress("gru", stream=every, every=0.0))
    assert len(every.getvalue().splitlines()) == 2 + 10
    # A tuning trial's caller prints its own end line.
    trial = io.StringIO()
    feed(ConsoleProgress("trial", stream=trial, announce=False, every=3600.0))
    assert trial.getvalue() == ""


def test_on_a_terminal_one_bar_is_redrawn_in_place_then_replaced_by_the_end_line():
    screen = Terminal()
    feed(ConsoleProgress("gru adding seed=0", stream=screen))
    text = screen.getvalue()
    assert "\r" in text and "|" in text and "val mse" in text
    # Everything before the end line redraws one line (carriage returns, no new lines).
    assert text.count("\n") == 1
    assert text.endswith("step_cap, step 100/100, loss 0.5, val mse 0.25 (best 0.2), 1.0 s\n")


class Recorder:
    def __init__(self):
        self.events = []

    def start(self, snap):
        self.events.append(("start", snap))

    def update(self, snap, *, validated):
        self.events.append(("update", snap, validated))

    def finish(self, snap, stopped):
        self.events.append(("finish", snap, stopped))


def test_the_callback_reports_steps_losses_and_validations_of_a_real_fit(tiny_config, tmp_path):
    recorder = Recorder()
    cfg = tiny_config("model=gru", "task=adding", "trainer.enable_progress_bar=true",
                      "trainer.max_steps=30", "protocol.val_every=10", "protocol.patience=null")
    body = train_and_evaluate(cfg, tmp_path, progress=recorder)
    assert body["status"] == "ok"
    kinds = [event[0] for event in recorder.events]
    assert kinds[0] == "start" and kinds[-1] == "finish" and kinds.count("finish") == 1
    validated = [event[1] for event in recorder.events if event[0] == "update" and event[2]]
    # One update per validation, after the Lightning call that scored it (several steps each).
    assert len(validated) == 3 and validated[0].step >= 10 and validated[-1].step == 30
    end, stopped = recorder.events[-1][1], recorder.events[-1][2]
    assert stopped == "step_cap" and (end.step, end.max_steps, end.metric) == (30, 30, "mse")
    assert end.val == body["curves"]["val"][-1] and end.loss is not None
    assert end.best == min(body["curves"]["val"])


def test_the_config_switch_turns_the_display_off(tiny_config, tmp_path):
    recorder = Recorder()
    train_and_evaluate(tiny_config("trainer.enable_progress_bar=false"), tmp_path,
                       progress=recorder)
    assert recorder.events == []


def test_a_failing_fit_still_ends_its_display():
    recorder = Recorder()
    callback = FitProgress(recorder)

    class Trainer:
        is_global_zero = True

    class Module:
        end_step, primary = 10, "mse"

        class fit_state:  # noqa: N801 - stands in for FitState's attributes
            step, loss_sum, loss_count = 3, 0.0, 0
            curve_train, curve_val, best_val = [0.4], [0.3], 0.3

    callback.on_fit_start(Trainer(), Module())
    callback.on_exception(Trainer(), Module(), KeyboardInterrupt())
    assert recorder.events[-1][2] == "stopped by KeyboardInterrupt"
    assert recorder.events[-1][1].step == 3
