"""How variants, axes and values are written for people (sweep/labels.py).

Conventions, not physics: the expected strings follow the rules written in the
module docstring (orientation = site azimuth of the front façade's outward
normal, clockwise from north — CONTRACT §1 and DESIGN §2.1; compass words are
common practice).
"""

import math

import pytest

from luxsweep.sweep.labels import (
    axis_label,
    en17037_text,
    format_number,
    orientation_text,
    plural,
    value_text,
    variant_name,
)

AXES = ["orientation", "climate", "glazings.main.transmittance", "room.windows.0.width"]


@pytest.mark.parametrize(("azimuth", "text"), [
    (0, "north"), (90, "east"), (180, "south"), (270, "west"), (360, "north"),
    (45.0, "north-east"), (315, "north-west"), (125, "125°"), (-90, "west"), (22.5, "22.5°"),
])
def test_orientation_words(azimuth, text):
    assert orientation_text(azimuth) == text


def test_variant_named_by_its_values():
    values = {"orientation": 180, "climate": "humid-piedmont",
              "glazings.main.transmittance": 0.55, "room.windows.0.width": 5.5}
    assert variant_name(values, AXES) == "south · humid-piedmont · τ 0.55 · window width 5.5 m"
    labelled = variant_name(values, AXES, {"room.windows.0.width": "glass width [m]",
                                           "climate": "site"})
    assert labelled == "south · site humid-piedmont · τ 0.55 · glass width 5.5 m"


def test_several_glazing_sets_are_told_apart():
    axes = ["glazings.north.transmittance", "glazings.south.transmittance"]
    name = variant_name({axes[0]: 0.7, axes[1]: 0.4}, axes)
    assert name == "τ 0.7 (north) · τ 0.4 (south)"


def test_axis_labels_take_the_study_labels_first():
    assert axis_label("room.windows.0.width") == "window width [m]"
    assert axis_label("room.windows.0.width", {"room.windows.0.width": "W"}) == "W"
    assert axis_label("room.reflectance.walls") == "walls reflectance"
    assert axis_label("glazings.main.transmittance") == "glazing main transmittance"
    assert axis_label("orientation") == "orientation (front façade)"


def test_numbers_plurals_and_levels():
    assert [format_number(v) for v in (7.0, 0.55, 98.94, 1234.5, 12345, math.nan)] == [
        "7", "0.55", "98.9", "1234", "12,345", "–"]
    assert value_text("room.windows.0.width", 4.0) == "4 m"
    assert value_text("climate", "inland") == "inland"
    assert plural(1, "variant") == "1 variant"
    assert plural(2, "variant") == "2 variants"
    assert plural(3, "criterion", "criteria") == "3 criteria"
    # EN 17037:2018 levels 0 none, 1 minimum, 2 medium, 3 high (CONTRACT §3)
    assert [en17037_text(v) for v in (0, 1.0, 2, 3, math.nan, None)] == [
        "0 none", "1 minimum", "2 medium", "3 high", "–", "–"]
