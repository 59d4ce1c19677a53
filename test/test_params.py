"""The parameters file reads numbers as a ROS 2 parameters file means them."""
from __future__ import annotations

from wheel_dr.core import Settings
from wheel_dr.params import parse_params_text


def test_exponent_without_a_dot_is_a_float():
    # rcl's YAML parameter parser reads "2e-05" as a double; PyYAML's YAML 1.1 resolver would make
    # it a string (common practice in parameters files written by hand or by tools).
    text = "/**:\n  ros__parameters:\n    noise:\n      k_left: 2e-05\n      k_right: 3E-4\n      alphas: [1e-2, 0.5, 3, .5]\n"
    values = parse_params_text(text)
    assert values["noise.k_left"] == 2e-05 and isinstance(values["noise.k_left"], float)
    assert values["noise.k_right"] == 3e-4
    settings = Settings.from_flat(values)
    assert settings.noise.alphas == (0.01, 0.5, 3.0, 0.5)


def test_integers_and_words_keep_their_types():
    values = parse_params_text("/**:\n  ros__parameters:\n    wheels:\n      counter_bits: 16\n      source: ticks\n")
    assert values["wheels.counter_bits"] == 16 and isinstance(values["wheels.counter_bits"], int)
    assert values["wheels.source"] == "ticks"
