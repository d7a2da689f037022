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
            "SPANWRIGHT_SOLVE_HERE_MAX_JOBS": "0",
        }
    )
    assert not s.embedded
    assert (s.max_jobs, s.max_time_budget, s.key_prefix) == (1000, 12.5, "farm-a")
    assert s.solve_here_max_jobs == 0  # 0 is meaningful: every plan takes the queue


@pytest.mark.parametrize(
    ("var", "value"),
    [
        ("SPANWRIGHT_MAX_JOBS", "many"),
        ("SPANWRIGHT_MAX_JOBS", "0"),
        ("SPANWRIGHT_MAX_WAIT", "nan"),
        ("SPANWRIGHT_SOLVE_HERE_MAX_JOBS", "-1"),
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


def settings_table() -> list[str]:
    """The rows deploy/README.md must hold: one per field of :class:`Settings`, in order,
    with its variable, default and what it sets (``variables()``), in Markdown."""
    from service.settings import variables

    rows = []
    for var, default, doc in variables():
        shown = "(unset)" if default is None or default == "" else f"`{default}`"
        rows.append(f"| `{var}` | {shown} | {doc.replace('``', '`')} |")
    return rows


def test_every_setting_is_documented_beside_the_others() -> None:
    """deploy/README.md, "Settings", lists every environment variable the service reads,
    its default and what it sets, exactly as the settings declare them (so a new setting
    such as ``SPANWRIGHT_SOLVE_HERE_MAX_JOBS`` cannot go undocumented, and a changed
    default cannot leave the page behind)."""
    from pathlib import Path

    readme = (Path(__file__).parents[2] / "deploy" / "README.md").read_text(encoding="utf-8")
    listed = [
        row for row in readme.splitlines() if row.startswith(("| `SPANWRIGHT_", "| `REDIS_URL`"))
    ]
    assert listed == settings_table()
