"""The shared registry refuses duplicates and names the choices for unknown names."""

import pytest

from loopzoo._registry import Registry, unknown_choice


def test_duplicate_names_are_refused():
    registry: Registry[int] = Registry("widget")
    registry.register("a")(1)
    with pytest.raises(ValueError, match="widget 'a' is already registered"):
        registry.register("a")(2)


def test_unknown_name_lists_choices_and_the_nearest():
    registry: Registry[int] = Registry("widget")
    for name in ("stacked", "residual-skip"):
        registry.register(name)(0)
    with pytest.raises(ValueError, match=r"unknown widget 'stackd'; available: stacked, "
                       r"residual-skip\. Did you mean 'stacked'\?"):
        registry.get("stackd")


def test_non_string_name_is_a_type_error():
    registry: Registry[int] = Registry("widget")
    with pytest.raises(TypeError, match="widget name must be a string, got list"):
        registry.get(["a"])  # type: ignore[arg-type]


def test_unknown_choice_without_near_match_gives_no_hint():
    message = str(unknown_choice("mode", "zzz", ["scaled", "gated"]))
    assert message == "unknown mode 'zzz'; available: scaled, gated."
