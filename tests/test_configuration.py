"""The one configuration: defaults, validation, JSON round trip, settings files."""

from __future__ import annotations

import json

import pytest

from rankrec.configuration import Configuration, Settings, read_settings, write_settings
from rankrec.errors import InputError


def test_defaults_are_the_documented_ones():
    # 0.85: the damping factor of the original PageRank paper (Brin & Page 1998); 30-minute session gap:
    # common practice in web analytics; 5 readers before a team list: this project's privacy floor.
    configuration = Configuration()
    assert configuration.damping == 0.85
    assert configuration.session_gap_seconds == 1800.0
    assert configuration.team_min_readers == 5
    assert configuration.related_epsilon > configuration.vector_epsilon


@pytest.mark.parametrize(
    ("values", "error", "match"),
    [
        ({"damping": 1.0}, ValueError, "damping"),
        ({"damping": "0.85"}, TypeError, "damping"),
        ({"lift": -2.1}, ValueError, "lift"),
        ({"navigation_weight": 1.5}, ValueError, "navigation_weight"),
        ({"navigation_window_days": 0}, ValueError, "navigation_window_days"),
        ({"session_gap_seconds": -1}, ValueError, "session_gap_seconds"),
        ({"repeat": "twice"}, ValueError, "repeat"),
        ({"team_min_readers": 0}, ValueError, "team_min_readers"),
        ({"team_min_readers": 2.5}, TypeError, "team_min_readers"),
        ({"related_epsilon": 1.0}, ValueError, "related_epsilon"),
        ({"tol": float("nan")}, ValueError, "tol"),
        ({"ranker": "forest"}, ValueError, "ranker"),
        ({"ranker_queries": 0}, ValueError, "ranker_queries"),
    ],
)
def test_bad_values_name_the_setting(values, error, match):
    with pytest.raises(error, match=match):
        Configuration(**values)


def test_round_trip_through_json_keeps_every_field():
    configuration = Configuration(
        damping=0.7,
        lift=0.0,
        navigation_weight=0.6,
        navigation_window_days=14,
        half_life_days=7,
        repeat="cap",
        ranker="linear",
        ranker_queries=500,
    )
    again = Configuration.from_dict(json.loads(json.dumps(configuration.to_dict())))
    assert again == configuration and (again.ranker, again.ranker_queries) == ("linear", 500)


def test_settings_written_before_learnt_rankers_read_as_no_ranker():
    # a settings file of the previous format held ``"ranker": {}``: it built the PageRank and text mix
    assert Configuration.from_dict({"ranker": {}}).ranker == "none"


def test_unknown_names_are_refused():
    with pytest.raises(ValueError, match="'blend'"):
        Configuration.from_dict({"blend": 0.3})


def test_settings_file_round_trip_and_errors(tmp_path):
    path = tmp_path / "report" / "settings.json"
    written = Settings(Configuration(lift=1.0), {"fingerprint": "abc", "metric": "ndcg@10"})
    write_settings(path, written)
    assert read_settings(path) == written
    assert list(path.parent.iterdir()) == [path]  # no staging file left behind
    path.write_text('{"format_version": 1, "configuration": {"damping": 2}}')
    with pytest.raises(InputError, match="damping"):
        read_settings(path)
    path.write_text("not json")
    with pytest.raises(InputError, match="settings.json"):
        read_settings(path)
    with pytest.raises(InputError, match="missing.json"):
        read_settings(tmp_path / "missing.json")
