"""The config loader turns any text into a SiteConfig or a ConfigError, nothing else:
deeply nested and huge documents included (PyYAML recurses per nesting level)."""

from __future__ import annotations

import os

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lightwarden.exporters.app.config import (
    MAX_CONFIG_BYTES,
    ConfigError,
    SiteConfig,
    parse_config,
)

_N = {"dev": 200, "ci": 2000, "fuzz": 200_000}[
    os.environ.get("LIGHTWARDEN_HYPOTHESIS_PROFILE") or ("ci" if os.environ.get("CI") else "dev")]
FUZZ = settings(max_examples=_N, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def loads_or_config_error(text: str) -> None:
    try:
        assert isinstance(parse_config(text, "fuzz.yaml"), SiteConfig)
    except ConfigError as exc:
        assert str(exc).startswith("fuzz.yaml")


@pytest.mark.parametrize("doc", [
    "[" * 5000 + "]" * 5000,
    "devices: " + "[" * 5000 + "]" * 5000,
    "a:\n" + "".join(" " * i + "b:\n" for i in range(1, 3000)),
    "devices:\n- " + "{x: " * 3000 + "1" + "}" * 3000,
])
def test_deep_nesting_is_a_clear_config_error(doc):
    with pytest.raises(ConfigError, match=r"fuzz\.yaml"):
        parse_config(doc, "fuzz.yaml")


def test_a_huge_file_is_refused_before_parsing():
    with pytest.raises(ConfigError, match="limited to"):
        parse_config("#" * (MAX_CONFIG_BYTES + 1), "fuzz.yaml")


_SCALAR = st.one_of(st.none(), st.booleans(), st.integers(), st.floats(allow_nan=True),
                    st.text(max_size=20))
_KEYS = st.sampled_from(["site", "devices", "poll", "credentials", "listen", "name", "host",
                         "port", "protocol", "credentials", "interval_s", "plant", "a", "b",
                         "state_dir", "alerting", "outbox_path", "x"])
_TREE = st.recursive(_SCALAR, lambda kids: st.one_of(
    st.lists(kids, max_size=4), st.dictionaries(_KEYS, kids, max_size=4)), max_leaves=30)


@FUZZ
@given(doc=st.dictionaries(_KEYS, _TREE, max_size=6))
def test_any_yaml_document_loads_or_is_a_config_error(doc):
    loads_or_config_error(yaml.safe_dump(doc))


@FUZZ
@given(text=st.text(max_size=300))
def test_any_text_loads_or_is_a_config_error(text):
    loads_or_config_error(text)
