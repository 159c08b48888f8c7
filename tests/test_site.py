"""Site settings: precedence (environment over file over defaults), refusals, and the entry-point rule.

No outside source applies: these are casefile's own configuration rules, checked as documented in
casefile/site.py.
"""

from __future__ import annotations

import json

import pytest

from casefile.site import (
    DEFAULT_MAX_PIXELS,
    SiteError,
    entry_point_trusted,
    load_site_settings,
)


@pytest.fixture(autouse=True)
def _clean_env(monkeypatch, tmp_path):
    for name in ("CASEFILE_TRUSTED_ENTRY_POINTS", "CASEFILE_TRUSTED_KEYS", "CASEFILE_MAX_PIXELS",
                 "CASEFILE_MAX_FILE_PIXELS"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("CASEFILE_CONFIG_DIR", str(tmp_path / "config"))


def test_defaults_without_a_file():
    s = load_site_settings()
    assert s.trusted_entry_points == () and s.trusted_keys == ()
    assert s.max_pixels == DEFAULT_MAX_PIXELS and s.source == "defaults"


def test_file_then_environment(tmp_path, monkeypatch):
    cfg = tmp_path / "config"
    cfg.mkdir()
    (cfg / "site.json").write_text(json.dumps({"trusted_entry_points": ["mypkg"], "trusted_keys": ["a.pub"],
                                               "max_pixels": 1000}))
    s = load_site_settings()
    assert s.trusted_entry_points == ("mypkg",)
    assert s.trusted_keys == (str(cfg / "a.pub"),)  # relative to the site file's folder
    assert s.max_pixels == 1000 and s.max_file_pixels >= 1000
    monkeypatch.setenv("CASEFILE_TRUSTED_ENTRY_POINTS", "other.nets, third")
    monkeypatch.setenv("CASEFILE_MAX_PIXELS", "50")
    s = load_site_settings()
    assert s.trusted_entry_points == ("other.nets", "third") and s.max_pixels == 50
    assert "$CASEFILE_TRUSTED_ENTRY_POINTS" in s.source


@pytest.mark.parametrize("content, words", [
    ("{not json", "not valid JSON"),
    ("[1, 2]", "JSON object"),
    ('{"trusted_entry_point": ["x"]}', "unknown setting 'trusted_entry_point'"),
    ('{"max_pixels": "many"}', "must be a whole number"),
    ('{"max_pixels": 0}', "at least 1"),
    ('{"trusted_keys": [""]}', "non-empty strings"),
    ("[" * 100000 + "]" * 100000, "nest too deeply"),
])
def test_malformed_file_is_one_line(tmp_path, content, words):
    f = tmp_path / "site.json"
    f.write_text(content)
    with pytest.raises(SiteError) as err:
        load_site_settings(f)
    assert words in str(err.value) and str(f) in str(err.value) and "\n" not in str(err.value)


def test_bad_environment_number(monkeypatch):
    monkeypatch.setenv("CASEFILE_MAX_PIXELS", "lots")
    with pytest.raises(SiteError, match="CASEFILE_MAX_PIXELS"):
        load_site_settings()


@pytest.mark.parametrize("entry, trusted, ok", [
    ("mypkg.nets:build", ["mypkg"], True),
    ("mypkg.nets:build", ["mypkg.nets"], True),
    ("mypkg.nets:build", ["mypkg.nets:build"], True),
    ("mypkg.nets:other", ["mypkg.nets:build"], False),
    ("mypkg.other:build", ["mypkg.nets"], False),
    ("mypkgevil:build", ["mypkg"], False),  # a prefix of the name is not a parent package
    ("subprocess:getoutput", [], False),
    ("subprocess:getoutput", ["mypkg"], False),
])
def test_entry_point_rule(entry, trusted, ok):
    assert entry_point_trusted(entry, trusted) is ok
