"""Search spaces: every topology's declared ranges are valid options, the optimiser's ranges are
added, and bad names or ranges are refused by name before anything trains."""

import math

import pytest

import loopzoo
from loopzoo.harness.config import compose_job, composer
from loopzoo.harness.errors import ConfigError
from loopzoo.harness.search_space import apply_values, at_bound, is_active, search_space
from loopzoo.topologies import TOPOLOGIES
from loopzoo.topologies._search import Choices, IntegerRange, RealRange, check_range


def job(*overrides, tmp_path="/tmp/unused"):
    with composer():
        return compose_job([*overrides, f"out={tmp_path}"])


@pytest.mark.parametrize("name", loopzoo.available())
def test_every_declared_range_holds_only_values_the_option_accepts(name):
    topology = TOPOLOGIES.get(name)
    for option, search in topology.tunable.items():
        check_range(option, search)
        if option.startswith("feedback."):
            continue
        ends = search.choices if isinstance(search, Choices) else (search.low, search.high)
        for value in ends:
            topology.option_specs[option].check(option, value)


@pytest.mark.parametrize("name", loopzoo.available())
def test_the_space_is_the_optimiser_ranges_then_the_topology_declaration(name):
    space = search_space(job(f"model={name}", "task=sines"))  # sines: targets observed later
    names = [t.name for t in space]
    assert names[:2] == ["lr", "weight_decay"]
    assert names[2:] == list(TOPOLOGIES.get(name).tunable)
    lr = space[0].search
    assert (lr.low, lr.high, lr.log) == (1e-4, 0.3, True)
    assert space[0].path == "optim.lr"


def test_model_tune_replaces_adds_and_drops_ranges():
    cfg = job("model=lstm", "+model.tune.num_layers={low:1,high:2}", "+model.tune.dropout=null")
    space = {t.name: t for t in search_space(cfg)}
    assert "dropout" not in space
    assert space["num_layers"].search == IntegerRange(1, 2, hard=("low",))
    cfg = job("model=hidden-feedback", "+model.tune.nonlinearity={choices:[tanh,relu]}")
    added = [t for t in search_space(cfg) if t.name == "nonlinearity"][0]
    assert added.search == Choices(("tanh", "relu")) and added.path == "model.options.nonlinearity"


BAD = [
    (["+model.tune.depth={low:1,high:3}"], r"tune\.depth: unknown tunable name .*num_layers"),
    (["+protocol.space.momentum={low:0.1,high:0.9}"], r"protocol\.space\.momentum.*lr, weight_"),
    (["+model.tune.num_layers={low:2,high:2}"], r"num_layers.* is empty; accepted: low < high"),
    (["+model.tune.num_layers={low:3,high:1}"], r"model\.tune\.num_layers.* is inverted"),
    (["protocol.space.lr={low:0.1,high:0.01,log:true}"], r"protocol\.space\.lr.* is inverted"),
    (["protocol.space.lr={low:0.0,high:0.1,log:true}"], r"log range needs low > 0"),
    (["protocol.space.lr={low:-1.0,high:0.1,log:false}"], r"lr holds -1.0; accepted: numbers > 0"),
    (["+model.tune.dropout={low:0.0,high:1.5}"], r"dropout value = 1.5 is invalid"),
    (["+model.tune.num_layers={choices:[]}"], r"choices are empty"),
    (["+model.tune.num_layers={low:1}"], r"lacks high"),
    (["+model.tune.num_layers={low:1,high:3,step:2}"], r"unknown keys \['step'\]"),
]


@pytest.mark.parametrize(("overrides", "message"), BAD)
def test_bad_names_and_ranges_are_refused_naming_the_field(overrides, message):
    with pytest.raises(ConfigError, match=message):
        search_space(job("model=lstm", *overrides))


def test_feedback_schedule_keys_are_tunable_only_on_a_feedback_topology():
    space = search_space(job("model=output-feedback", "task=sines"))
    assert [t.path for t in space][2:] == ["model.feedback.k"]
    with pytest.raises(ConfigError, match=r"model\.tune\.feedback\.k: unknown tunable name"):
        search_space(job("model=gru", "+model.tune.feedback={k:{low:5,high:50}}"))
    with pytest.raises(ConfigError, match=r"value 0.5 is refused.*k >= 1"):
        search_space(job("model=output-feedback", "task=sines",
                         "+model.tune.feedback={k:{low:0.5,high:50}}"))


@pytest.mark.parametrize("task", ["adding", "digits"])
def test_the_schedule_is_not_searched_where_targets_are_never_observed(task):
    # The run trains free running there (nothing observed to teacher-force), so the schedule's
    # keys would be a search dimension without effect.
    assert not loopzoo.tasks.TASKS.get(task).targets_observed
    space = search_space(job("model=output-feedback", f"task={task}"))
    assert [t.name for t in space] == ["lr", "weight_decay"]
    with pytest.raises(ConfigError, match=r"model\.tune\.feedback\.k: task .* never observes"):
        search_space(job("model=output-feedback", f"task={task}",
                         "+model.tune.feedback={k:{low:5,high:50}}"))


def test_a_conditional_range_is_searched_only_when_its_condition_holds():
    space = {t.name: t for t in search_space(job("model=residual-skip"))}
    data = {"model": {"options": {"mode": "scaled"}}}
    assert is_active(space["scale"], {"mode": "scaled"}, data)
    assert not is_active(space["scale"], {"mode": "gated"}, data)
    # A condition on a name that is not searched reads the config.
    assert not is_active(space["scale"], {}, {"model": {"options": {"mode": "gated"}}})


def test_values_are_written_to_their_config_keys():
    cfg = job("model=output-feedback")
    tuned = apply_values(cfg, {"lr": 0.02, "feedback.k": 80.0})
    assert tuned.optim.lr == 0.02 and tuned.model.feedback.k == 80.0 and cfg.optim.lr != 0.02


def test_at_bound_flags_soft_edges_only():
    # 5% of the range, on the log scale for log ranges (common practice for a "widen me" flag).
    lr = RealRange(1e-4, 0.3, log=True)
    width = math.log(0.3) - math.log(1e-4)
    assert lr.at_edge(0.29) and lr.at_edge(1e-4)
    assert not lr.at_edge(math.exp(math.log(0.3) - 0.06 * width))
    layers = IntegerRange(1, 3, hard=("low",))
    assert layers.at_edge(3) and not layers.at_edge(1) and not layers.at_edge(2)
    assert not Choices(("a", "b")).at_edge("a")
    space = search_space(job("model=lstm"))
    assert at_bound(space, {"lr": 0.299, "weight_decay": 1e-6, "num_layers": 3}) == [
        "lr", "num_layers"]
