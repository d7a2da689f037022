"""Settings come from the environment once, typed, and bad values name their variable."""

from __future__ import annotations

import pytest

from service.settings import Settings, SettingsError


def test_defaults_without_environment() -> None:
    """No variables: the embedded store, loopback-friendly defaults (12-factor config)."""
    s = Settings.from_env({})
    assert s.embedded and s.redis_url is None
    assert s.default_tenant == "local"
    assert s.default_time_budget <= s.max_time_budget


def test_prefixed_variables_are_typed() -> None:
    """SPANWRIGHT_* values are converted to the field's type; REDIS_URL turns Redis on."""
    s = Settings.from_env(
        {
            "REDIS_URL": "redis://127.0.0.1:6390/2",
            "SPANWRIGHT_MAX_JOBS": "1_000",
            "SPANWRIGHT_MAX_TIME_BUDGET": "12.5",
            "SPANWRIGHT_KEY_PREFIX": "farm-a",
        }
    )
    assert not s.embedded
    assert (s.max_jobs, s.max_time_budget, s.key_prefix) == (1000, 12.5, "farm-a")


@pytest.mark.parametrize(
    ("var", "value"),
    [
        ("SPANWRIGHT_MAX_JOBS", "many"),
        ("SPANWRIGHT_MAX_JOBS", "0"),
        ("SPANWRIGHT_MAX_WAIT", "nan"),
        ("SPANWRIGHT_KEY_PREFIX", "a b"),
    ],
)
def test_bad_values_name_the_variable(var: str, value: str) -> None:
    """A value that cannot be used is refused at start-up with the variable's name."""
    with pytest.raises(SettingsError) as err:
        Settings.from_env({var: value})
    assert var in err.value.detail
    assert any(i.path == (var,) for i in err.value.issues)


def test_settings_are_frozen() -> None:
    """One object built at start-up and passed down: it cannot be changed later."""
    s = Settings()
    with pytest.raises(AttributeError):
        s.max_jobs = 3  # type: ignore[misc]
