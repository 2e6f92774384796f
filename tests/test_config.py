"""Configuration loading: every bad input is one line naming the file and key (exit 2)."""

from __future__ import annotations

import textwrap

import pytest

from monitor.config import config_from_dict, load_config
from monitor.errors import ConfigError

BASE = """
[historian]
url = "sqlite:///plant.db"

[[units]]
name = "R-1"
temperature_tag = "R1.TT"

[recipes.AX]
kinetics = "k.toml"
"""


def write(tmp_path, text: str):
    p = tmp_path / "convmon.toml"
    p.write_text(textwrap.dedent(text))
    return p


def test_minimal_config_loads_with_defaults(tmp_path):
    cfg = load_config(write(tmp_path, BASE))
    assert cfg.historian.samples_table == "tag_samples"
    assert cfg.units[0].temperature_unit == "degC"
    # relative paths resolve against the config file's folder
    assert cfg.historian.url == f"sqlite:///{(tmp_path / 'plant.db').resolve()}"
    assert cfg.recipes["AX"].kinetics == (tmp_path / "k.toml").resolve()


def test_env_var_expansion(tmp_path, monkeypatch):
    monkeypatch.setenv("HIST_PW", "s3cret")
    text = BASE.replace("sqlite:///plant.db", "postgresql+psycopg://u:${HIST_PW}@db/x")
    assert "s3cret" in load_config(write(tmp_path, text)).historian.url


@pytest.mark.parametrize(
    "edit, key",
    [
        (lambda t: t + "\n[poll]\nintervl_s = 3\n", "poll.intervl_s"),  # unknown key
        (lambda t: t.replace('name = "R-1"', "name = 7"), "units[0].name"),  # wrong type
        (
            lambda t: t.replace(
                'temperature_tag = "R1.TT"', 'temperature_tag = "R1.TT"\ntemperature_unit = "degR"'
            ),
            "units[0].temperature_unit",
        ),  # unknown unit
        (
            lambda t: t.replace('kinetics = "k.toml"', "target_conversion = 0.9"),
            "recipes.AX.kinetics",
        ),  # recipe without kinetics
        (lambda t: t.replace('temperature_tag = "R1.TT"', ""), "units[0].temperature_tag"),
        (lambda t: t.replace("sqlite:///plant.db", "${NOPE_NOT_SET}"), "historian.url"),
        (lambda t: t + '\n[site]\ntimezone = "Mars/Olympus"\n', "site.timezone"),
        (
            lambda t: t.replace(
                'kinetics = "k.toml"', 'kinetics = "k.toml"\ntemperature_plan = [[0, 40], [10]]'
            ),
            "recipes.AX.temperature_plan",
        ),
        (
            lambda t: t.replace(
                'kinetics = "k.toml"',
                'kinetics = "k.toml"\n[recipes.AX.safety]\nheat_of_reaction = "-85 kJ"\n'
                'heat_capacity = "1.9 kJ/(kg*K)"\ndensity = "950 kg/m^3"\n'
                'mtt = "80 degC"\nt_d24 = "150 degC"',
            ),
            "recipes.AX.safety.heat_of_reaction",
        ),  # wrong dimension
    ],
)
def test_bad_config_names_the_key(tmp_path, edit, key):
    p = write(tmp_path, edit(BASE))
    with pytest.raises(ConfigError) as err:
        load_config(p)
    assert err.value.exit_code == 2
    msg = str(err.value)
    assert str(p) in msg and f"[{key}]" in msg, msg
    assert "\n" not in msg


def test_missing_and_malformed_files(tmp_path):
    with pytest.raises(ConfigError, match="not found"):
        load_config(tmp_path / "absent.toml")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(write(tmp_path, "[historian\nurl = 1"))


def test_safety_quantities_are_converted_to_si():
    data = {
        "historian": {"url": "sqlite:////tmp/x.db"},
        "recipes": {
            "AX": {
                "kinetics": "k.toml",
                "safety": {
                    "heat_of_reaction": "-20.3 kcal/mol",
                    "heat_capacity": "1.9 kJ/(kg*K)",
                    "density": "0.95 g/cm^3",
                    "mtt": "176 degF",
                    "t_d24": "423.15 K",
                },
            }
        },
    }
    s = config_from_dict(data).recipes["AX"].safety
    # 1 kcal (thermochemical) = 4184 J (NIST SP 811, 2008, B.8)
    assert s.heat_of_reaction_j_per_mol == pytest.approx(-20.3 * 4184.0, rel=1e-3)
    assert s.density_kg_per_m3 == pytest.approx(950.0)
    assert s.mtt_k == pytest.approx(353.15)  # 176 degF = 80 degC exactly
