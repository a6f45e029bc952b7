"""Pictures say in words what dashes and arrowheads show: "(both ways)", "(standby)", "(no filter here)"."""

from __future__ import annotations

import dataclasses
import re

from modeldiff import picture
from modeldiff.render.svg import svg_of
from modelkit import bikeshare


def labels(pic) -> dict[str, str]:
    return {a.link: a.label for a in pic.arrows}


def test_the_default_setting_names_two_way_and_standby_links_and_leaves_one_way_plain():
    found = labels(picture.picture(bikeshare()))
    assert found["district_access_district"] == "district_access_district (both ways)"
    assert found["trips_end_day"] == "trips_end_day (standby)"
    assert found["trips_start_day"] == "trips_start_day"  # one-way: the name alone
    assert found["trips_bike"] == "trips_bike"


def test_a_setting_that_benches_or_turns_off_a_live_link_says_no_filter_here():
    m = bikeshare()
    setting, _ = picture.resolve(m, "measure:trips_by_end_day")  # via: [trips_end_day] benches trips_start_day
    found = labels(picture.picture(m, setting=setting))
    assert found["trips_start_day"] == "trips_start_day (no filter here)"
    assert found["trips_end_day"] == "trips_end_day"  # followed here: a plain one-way link


def test_every_drawn_format_carries_the_words():
    pic = picture.picture(bikeshare())
    mermaid, dot, svg = picture.mermaid_of(pic), picture.dot_of(pic), svg_of(pic)
    for words in ("district_access_district (both ways)", "trips_end_day (standby)"):
        assert f'|"{picture.mermaid_label(words)}"|' in mermaid
        assert f'label="{words}"' in dot
        assert re.search(rf">{re.escape(words)}</text>", svg)
    assert '|"trips_start_day"|' in mermaid and 'label="trips_start_day"' in dot


def test_a_removed_link_is_still_labelled_removed():
    m = bikeshare()
    gone = dataclasses.replace(m.links["trips_bike"], name="trips_bike_old")
    pic = picture.picture(m, removed_links=[gone])
    assert labels(pic)["trips_bike_old"] == "trips_bike_old (removed)"
