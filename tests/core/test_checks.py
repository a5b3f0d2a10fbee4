"""One set of rules for every option: a topology option, a task option and a training setting
treat the same value the same way and refuse it in the same words."""

import numpy as np
import pytest
from omegaconf import OmegaConf

import loopzoo
from loopzoo._checks import choice, integer, real
from loopzoo.engine.errors import ConfigError
from loopzoo.engine.settings import read_settings
from loopzoo.harness.config import compose_job, composer


def _settings(tmp_path, *overrides):
    with composer():
        cfg = compose_job(["model=gru", "task=adding", *overrides, f"out={tmp_path}"])
    return read_settings(OmegaConf.to_container(cfg, resolve=True))


def test_a_whole_float_is_the_integer_everywhere(tmp_path):
    assert integer("x", 2.0) == 2 and integer("x", np.int64(3)) == 3
    assert loopzoo.create("stacked", input_size=2, output_size=1, hidden_size=4,
                          num_layers=2.0).options["num_layers"] == 2
    assert loopzoo.tasks.create("parity", length=6.0).options.length == 6
    assert _settings(tmp_path, "trainer.max_steps=30.0").max_steps == 30


@pytest.mark.parametrize("bad", [2.5, True, "3", float("inf")])
def test_the_same_bad_value_is_refused_in_the_same_words_everywhere(tmp_path, bad):
    tail = f" = {bad!r} is invalid; accepted: an integer"
    with pytest.raises(ValueError, match="option num_layers" + tail):
        loopzoo.create("stacked", input_size=2, output_size=1, hidden_size=4, num_layers=bad)
    with pytest.raises(ValueError, match="length" + tail):
        loopzoo.tasks.create("parity", length=bad)
    with pytest.raises(ConfigError, match="trainer.max_steps" + tail):
        _settings(tmp_path, f"trainer.max_steps={bad!r}" if isinstance(bad, str)
                  else f"trainer.max_steps={bad}")


def test_choices_name_the_nearest_everywhere(tmp_path):
    with pytest.raises(ValueError, match=r"accepted: one of 'tanh', 'relu'\. Did you mean 'tanh'"):
        loopzoo.create("hidden-feedback", input_size=2, output_size=1, hidden_size=4,
                       nonlinearity="tnah")
    with pytest.raises(ValueError, match=r"one of 'rows', 'pixels'\. Did you mean 'rows'"):
        loopzoo.tasks.create("digits", read="row")
    with pytest.raises(ConfigError, match=r"one of 'free_running', 'measured_feedback'\. "
                                          r"Did you mean 'free_running'"):
        _settings(tmp_path, "protocol.feedback_select=free_runing")
    assert choice("x", "a", ["a", "b"]) == "a"


def test_intervals_say_which_ends_are_open():
    with pytest.raises(ValueError, match=r"x = 1.0 is invalid; accepted: a finite number in "
                                         r"\(0.0, 1.0\)"):
        real("x", 1.0, low=0.0, high=1.0, low_open=True, high_open=True)
    with pytest.raises(ValueError, match=r"accepted: a finite number >= 0"):
        real("x", -1, low=0)
    assert real("x", 0, low=0) == 0.0
