"""Configuration loading: every bad input is one line naming the file and key (exit 2)."""

from __future__ import annotations

import copy
import math
import textwrap
import tomllib

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from monitor.config import config_from_dict, load_config
from monitor.errors import ConfigError
from tests.fixtures_plant import write_plant_config

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
    assert cfg.store.url == f"sqlite:///{(tmp_path / 'var' / 'convmon.db').resolve()}"
    assert cfg.estimator.monte_carlo_draws == 1000 and cfg.poll.interval_s == 30.0


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
    bad = write(tmp_path, '[historian]\nurl = "sqlite:///plant.db"\n[store\nurl = 1')
    with pytest.raises(ConfigError, match="not valid TOML at line 3") as err:
        load_config(bad)
    assert str(bad) in str(err.value)
    (tmp_path / "latin1.toml").write_bytes(b'[site]\nname = "W\xfcrzburg"\n')
    with pytest.raises(ConfigError, match="not UTF-8"):  # was a traceback
        load_config(tmp_path / "latin1.toml")


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
    # 1 kcal (thermochemical) = 4184 J exactly (NIST SP 811, 2008, B.8); the IT calorie
    # is 4.1868 J (same table), 6.7e-4 away: rel=1e-9 tells the two apart
    assert s.heat_of_reaction_j_per_mol == pytest.approx(-20.3 * 4184.0, rel=1e-9)
    assert s.heat_of_reaction_j_per_mol != pytest.approx(-20.3 * 4186.8, rel=1e-7)
    assert s.density_kg_per_m3 == pytest.approx(950.0, rel=1e-12)  # 1 g/cm^3 = 1000 kg/m^3
    assert s.heat_capacity_j_per_kg_k == pytest.approx(1900.0, rel=1e-12)
    assert s.mtt_k == pytest.approx(353.15, rel=1e-12)  # 176 degF = 80 degC exactly (B.9)
    assert s.t_d24_k == 423.15


# ------------------------------------------------------------ the pydantic model
SAFETY_OK = (
    '\n[recipes.AX.safety]\nheat_of_reaction = "-85 kJ/mol"\nheat_capacity = "1.9 kJ/(kg*K)"\n'
    'density = "950 kg/m^3"\nmtt = "80 degC"\nt_d24 = "150 degC"\n'
)


def in_recipe(extra: str) -> str:
    return BASE + extra + "\n"


def in_unit(extra: str) -> str:
    return BASE.replace('temperature_tag = "R1.TT"', 'temperature_tag = "R1.TT"\n' + extra)


def in_historian(extra: str) -> str:
    return BASE.replace('url = "sqlite:///plant.db"', 'url = "sqlite:///plant.db"\n' + extra)


def in_safety(old: str, new: str) -> str:
    assert old in SAFETY_OK
    return BASE + SAFETY_OK.replace(old, new)


def test_sample_configs_load_into_the_attributes_the_code_uses():
    from monitor.batch.settings import EstimatorSettings

    plant = load_config("config/sample_plant.toml")
    assert plant.path.name == "sample_plant.toml" and plant.base_dir == plant.path.parent
    assert plant.historian.samples_columns.seq == "seq"
    assert plant.historian.good_quality == (0,)
    assert plant.site.timezone == "Europe/Berlin"
    assert isinstance(plant.estimator, EstimatorSettings)
    r101 = plant.unit("R-101")
    assert r101.temperature_limits_k == pytest.approx((263.15, 473.15), rel=1e-12)
    dim7 = plant.recipe("DIM-7")
    assert dim7.name == "DIM-7" and dim7.kinetics.is_absolute() and dim7.kinetics.exists()
    # [[minutes, degC]] -> (s, K): 0 degC = 273.15 K exactly (NIST SP 811, 2008, B.9)
    assert dim7.temperature_plan[1] == pytest.approx((50 * 60.0, 343.15), rel=1e-12)
    assert dim7.safety.heat_of_reaction_j_per_mol == -70e3 and dim7.safety.assessed_class == 3
    assert plant.recipe("CPL-3").safety is None and plant.unit("R-9") is None
    other = load_config("config/other_schema.toml")
    assert other.historian.events_columns.seq is None  # `seq = false`: the site has none
    assert other.historian.good_quality == ("GOOD",)
    # 158 degF = 70 degC (NIST SP 811, 2008, B.9: t/degC = (t/degF - 32)/1.8)
    assert other.recipe("DIM-7").temperature_plan[1][1] == pytest.approx(343.15, rel=1e-12)
    assert other.site.timezone == "America/Chicago"


def test_models_are_frozen(tmp_path):
    from pydantic import ValidationError

    cfg = load_config(write(tmp_path, BASE))
    with pytest.raises(ValidationError):
        cfg.units[0].name = "R-2"
    with pytest.raises(ValidationError):
        cfg.poll.interval_s = 1.0


def test_site_zone_defaults_to_the_historians(tmp_path):
    cfg = load_config(write(tmp_path, in_historian('naive_timezone = "Europe/Vienna"')))
    assert cfg.site.timezone == "Europe/Vienna"


def test_unknown_key_is_named_unknown_with_a_near_miss(tmp_path):
    """Before: a typo'd required key was reported only as the *missing* key."""
    typo = BASE.replace('temperature_tag = "R1.TT"', 'temprature_tag = "R1.TT"')
    with pytest.raises(ConfigError) as err:
        load_config(write(tmp_path, typo))
    msg = str(err.value)
    assert "[units[0].temprature_tag] unknown key; did you mean 'temperature_tag'?" in msg, msg
    assert "1 more problem" in msg  # the key it makes missing is counted, not shown first


@pytest.mark.parametrize(
    "text, key, expected",
    [
        (
            BASE + "\n[estimator]\nmonte_carlo_drawz = 50\n",
            "estimator.monte_carlo_drawz",
            "monte_carlo_draws",
        ),
        (
            in_recipe("initial_concentraton = 1.2"),
            "recipes.AX.initial_concentraton",
            "initial_concentration",
        ),
        (BASE + SAFETY_OK + "denstiy = 1\n", "recipes.AX.safety.denstiy", "density"),
        (
            in_historian('sample_columns = { tag = "t" }'),
            "historian.sample_columns",
            "samples_columns",
        ),
    ],
)
def test_unknown_keys_everywhere_suggest_the_known_one(tmp_path, text, key, expected):
    with pytest.raises(ConfigError) as err:
        load_config(write(tmp_path, text))
    msg = str(err.value)
    assert f"[{key}] unknown key; did you mean '{expected}'?" in msg, msg


def test_unknown_key_without_a_near_miss_lists_the_keys(tmp_path):
    with pytest.raises(
        ConfigError,
        match=r"\[poll\.zzz\] unknown key; expected one of: "
        r"interval_s, misfire_grace_s",
    ):
        load_config(write(tmp_path, BASE + "\n[poll]\nzzz = 1\n"))


def test_unset_variable_is_named(tmp_path, monkeypatch):
    monkeypatch.delenv("CONVMON_TEST_UNSET", raising=False)
    text = BASE.replace("sqlite:///plant.db", "postgresql://u:${CONVMON_TEST_UNSET}@db/x")
    with pytest.raises(ConfigError, match=r"\[historian\.url\].*CONVMON_TEST_UNSET is not set"):
        load_config(write(tmp_path, text))


@pytest.mark.parametrize(
    "text, key, expected",
    [
        # each of these loaded without complaint before (issue #10)
        (
            in_recipe("temperature_plan = [[0, 40.0], [30, 900.0]]"),
            "temperature_plan",
            "[150, 800]",
        ),
        (in_recipe('plan_unit = "K"\ntemperature_plan = [[0, 70.0]]'), "temperature_plan", "[K]"),
        (in_recipe("temperature_plan = [[-10, 40.0]]"), "temperature_plan", "time since start"),
        (in_recipe("initial_concentration = 1800.0"), "initial_concentration", "(0, 60]"),
        (in_recipe('assay_kind = "conversion"\nassay_sd = 2.0'), "assay_sd", "(0, 1)"),
        (in_recipe("assay_sd = inf"), "assay_sd", "finite"),
        (in_safety('"-85 kJ/mol"', '"85 kJ/mol"'), "safety.heat_of_reaction", "exothermic"),
        (in_safety('mtt = "80 degC"', 'mtt = "80 K"'), "safety.mtt", "[150, 800]"),
        (in_safety('density = "950 kg/m^3"', 'density = "-950 kg/m^3"'), "safety.density", "> 0"),
        (in_safety('"-85 kJ/mol"', '"-85 kJ/(mol"'), "safety.heat_of_reaction", "cannot read"),
        # and these were refused before too, kept
        (in_recipe("target_conversion = 95"), "target_conversion", "(0, 1)"),
        (in_recipe("target_conversion = 0"), "target_conversion", "(0, 1)"),
        (in_recipe("temperature_plan = [[30, 40.0], [0, 40.0]]"), "temperature_plan", "decrease"),
        (in_recipe("assay_sd = 0"), "assay_sd", "> 0"),
        (in_recipe("initial_concentration = -1"), "initial_concentration", "(0, 60]"),
        (in_safety('"-85 kJ/mol"', '"-85 kJ"'), "safety.heat_of_reaction", "J/mol"),
        (in_safety('"1.9 kJ/(kg*K)"', '"1.9 kJ/kg"'), "safety.heat_capacity", "J/(kg*K)"),
        (in_safety('density = "950 kg/m^3"', "density = 950"), "safety.density", "unit"),
    ],
)
def test_recipe_refusals_name_the_key_and_what_was_expected(tmp_path, text, key, expected):
    p = write(tmp_path, text)
    with pytest.raises(ConfigError) as err:
        load_config(p)
    msg = str(err.value)
    assert err.value.exit_code == 2 and "\n" not in msg
    assert msg.startswith(f"{p}: [recipes.AX.{key}] ") and expected in msg, msg


@pytest.mark.parametrize(
    "text, key, expected",
    [
        # loaded without complaint before
        (in_unit("temperature_limits = [-300.0, 100.0]"), "units[0].temperature_limits", "zero"),
        (in_historian("good_quality = []"), "historian.good_quality", "at least one"),
        (in_historian("late_window_s = inf"), "historian.late_window_s", "finite"),
        (in_historian("fetch_rows = 1000.5"), "historian.fetch_rows", "integer"),
        (BASE + "\n[estimator]\nseed = -1\n", "estimator.seed", ">= 0"),
        (BASE + "\n[estimator]\nmonte_carlo_draws = 10.5\n", "estimator.monte_carlo_draws", "int"),
        (BASE + '\n[store]\nurl = "sqlite:///./plant.db"\n', "store.url", "historian"),
        # refused before too, kept
        (in_unit("temperature_limits = [100.0, 20.0]"), "units[0].temperature_limits", "low <"),
        (in_historian("good_quality = [0.5]"), "historian.good_quality[0]", "quality code"),
        (in_historian("good_quality = [true]"), "historian.good_quality[0]", "quality code"),
        (in_historian('naive_timezone = "Europe/Atlantis"'), "historian.naive_timezone", "IANA"),
        (in_historian("retries = 1000"), "historian.retries", "[0, 100]"),
        (BASE + "\n[poll]\ninterval_s = 0\n", "poll.interval_s", "> 0"),
        (BASE + "\n[poll]\nmisfire_grace_s = -5\n", "poll.misfire_grace_s", "> 0"),
        (BASE + '\n[poll]\ninterval_s = "30"\n', "poll.interval_s", "number"),
        (BASE + "\n[poll]\ninterval_s = true\n", "poll.interval_s", "number"),
        (BASE + "\n[estimator]\nmax_gap_s = 0\n", "estimator.max_gap_s", "> 0"),
        (BASE + "\n[estimator]\nhorizon_h = -1\n", "estimator.horizon_h", "> 0"),
        (BASE + "\n[estimator]\nmonte_carlo_draws = 9\n", "estimator.monte_carlo_draws", "[10,"),
        (BASE + "\n[writeback]\nenabled = true\n", "writeback.url", "no url"),
        (BASE + '\n[site]\ntimezone = "UTC+2"\n', "site.timezone", "IANA"),
        (BASE.replace("sqlite:///plant.db", "plant.db"), "historian.url", "SQLAlchemy URL"),
        (
            in_historian("samples_columns = { seq = true }"),
            "historian.samples_columns.seq",
            "false",
        ),
        (BASE + '\n[[units]]\nname = "R-1"\ntemperature_tag = "X"\n', "units[1].name", "twice"),
        (BASE.replace("[[units]]", "[units]"), "units", "list"),
        (BASE.replace("[historian]", "[historians]"), "historians", "historian"),
    ],
)
def test_refusals_name_the_key_and_what_was_expected(tmp_path, text, key, expected):
    p = write(tmp_path, text)
    with pytest.raises(ConfigError) as err:
        load_config(p)
    msg = str(err.value)
    assert err.value.exit_code == 2 and "\n" not in msg
    assert msg.startswith(f"{p}: [{key}] ") and expected in msg, msg


def test_store_on_the_historian_file_through_a_symlink_is_refused(tmp_path):
    (tmp_path / "plant.db").write_bytes(b"")
    (tmp_path / "store.db").symlink_to(tmp_path / "plant.db")
    with pytest.raises(ConfigError, match=r"\[store\.url\] the store must not be the historian"):
        load_config(write(tmp_path, BASE + '\n[store]\nurl = "sqlite:///store.db"\n'))
    (tmp_path / "sub").mkdir()
    other = tmp_path / "sub" / "convmon.toml"
    other.write_text(BASE.replace("sqlite:///plant.db", "sqlite:///../plant.db"))
    with pytest.raises(ConfigError, match="historian"):  # ../plant.db from sub/ == plant.db
        config_from_dict(
            {
                **tomllib.loads(other.read_text()),
                "store": {"url": f"sqlite:///{tmp_path}/plant.db"},
            },
            other,
        )


@pytest.mark.parametrize(
    "historian, store, refused",
    [
        ("postgresql+psycopg://u@127.0.0.1/plant", "postgresql://v@localhost:5432/plant", True),
        ("postgresql://u@db.site:5433/plant", "postgresql+psycopg://u:pw@DB.site:5433/plant", True),
        (
            "mysql+pymysql://root@127.0.0.1:3306/plant",
            "mariadb+pymysql://root@localhost/plant",
            True,
        ),
        ("postgresql://u@127.0.0.1/plant", "postgresql://u@127.0.0.1/convmon", False),
        ("postgresql://u@127.0.0.1/plant", "postgresql://u@127.0.0.1:5433/plant", False),
        ("postgresql://u@db-a/plant", "postgresql://u@db-b/plant", False),
        ("postgresql://u@127.0.0.1/plant", "sqlite:///plant", False),
        ("sqlite:///:memory:", "sqlite:///:memory:", False),  # each in-memory database its own
    ],
)
def test_store_on_the_historian_server_database_is_refused(historian, store, refused):
    data = {"historian": {"url": historian}, "store": {"url": store}}
    if refused:
        with pytest.raises(ConfigError, match=r"\[store\.url\].*historian") as err:
            config_from_dict(data)
        assert "pw" not in str(err.value)  # no password in messages
    else:
        assert config_from_dict(data).store.url.endswith(store.rsplit("/", 1)[-1])


def test_several_problems_are_counted(tmp_path):
    text = in_recipe("target_conversion = 2\nassay_sd = -1") + "\n[poll]\ninterval_s = -1\n"
    with pytest.raises(ConfigError, match=r"\(2 more problems in this file\)"):
        load_config(write(tmp_path, text))


# Every key of a configuration (with all optional tables), for the fuzz test below.
FULL = {
    "site": {"name": "Tessel Works", "timezone": "Europe/Berlin"},
    "historian": {
        "url": "sqlite:///plant.db",
        "samples_table": "tag_samples",
        "samples_columns": {
            "seq": "seq",
            "tag": "tag",
            "time": "ts",
            "value": "value",
            "quality": "quality",
        },
        "good_quality": [0, "GOOD"],
        "naive_timezone": "UTC",
        "events_table": "batch_events",
        "events_columns": {
            "seq": False,
            "batch": "batch_id",
            "unit": "unit",
            "recipe": "recipe",
            "event": "event",
            "time": "ts",
        },
        "start_event": "start",
        "end_event": "end",
        "connect_timeout_s": 10,
        "statement_timeout_s": 120.0,
        "fetch_rows": 50000,
        "late_window_s": 3600.0,
        "late_window_rows": 5000,
        "safety_lag_s": 5.0,
        "retries": 3,
    },
    "store": {"url": "sqlite:///convmon.db"},
    "poll": {"interval_s": 30, "misfire_grace_s": 60},
    "estimator": {
        "max_gap_s": 300.0,
        "monte_carlo_draws": 100,
        "seed": 1,
        "mismatch_sigma": 4.0,
        "horizon_h": 72.0,
    },
    "writeback": {"enabled": True, "url": "sqlite:///calc.db", "table": "calc", "tag_prefix": "CM"},
    "units": [
        {
            "name": "R-1",
            "temperature_tag": "R1.TT",
            "temperature_unit": "degF",
            "temperature_limits": [14.0, 392.0],
            "assay_tag": "R1.A",
            "charge_tag": "R1.C",
        }
    ],
    "recipes": {
        "AX": {
            "kinetics": "k.toml",
            "assay_kind": "conversion",
            "assay_sd": 0.01,
            "initial_concentration": 1.2,
            "target_conversion": 0.95,
            "temperature_plan": [[0, 40.0], [45, 70.0]],
            "plan_unit": "degC",
            "safety": {
                "heat_of_reaction": "-85 kJ/mol",
                "heat_capacity": "1.9 kJ/(kg*K)",
                "density": "950 kg/m^3",
                "mtt": "80 degC",
                "t_d24": "150 degC",
                "assessed_class": 2,
            },
        }
    },
}


def _key_paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _key_paths(v, (*prefix, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _key_paths(v, (*prefix, i))


KEY_PATHS = [p for p in _key_paths(FULL) if p]

# what TOML can hold (and None, which only Python can pass)
_SCALARS = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.floats(),
    st.text(max_size=40),
    st.sampled_from(
        [
            "",
            "0",
            "30",
            "-85 kJ/mol",
            "80 degC",
            "K",
            "degC",
            "nan",
            "${NOPE}",
            "sqlite:///plant.db",
            "postgresql://u@localhost/x",
            "1e999 K",
            "1 kg**99",
            "Europe/Berlin",
            "../",
            "\x00",
            "conversion",
            "power",
        ]
    ),
    st.datetimes(),
    st.dates(),
)
JUNK = st.recursive(
    _SCALARS,
    lambda inner: (
        st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=12), inner, max_size=4)
    ),
    max_leaves=12,
)


def test_the_full_config_loads(tmp_path):
    cfg = config_from_dict(copy.deepcopy(FULL), tmp_path / "convmon.toml")
    assert cfg.units[0].temperature_limits_k == pytest.approx((263.15, 473.15), rel=1e-12)
    assert cfg.historian.events_columns.seq is None and cfg.writeback.enabled


@settings(max_examples=600, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(where=st.sampled_from(KEY_PATHS), junk=JUNK)
def test_junk_at_any_key_is_a_config_error_never_a_traceback(tmp_path_factory, where, junk):
    data = copy.deepcopy(FULL)
    node = data
    for part in where[:-1]:
        node = node[part]
    node[where[-1]] = junk
    path = tmp_path_factory.getbasetemp() / "fuzz" / "convmon.toml"
    try:
        cfg = config_from_dict(data, path)
    except ConfigError as exc:
        msg = str(exc)
        assert msg.startswith(f"{path}: ") and len(msg.splitlines()) == 1, msg
        assert exc.exit_code == 2
    else:
        assert all(math.isfinite(v) for u in cfg.units for v in u.temperature_limits_k)


def test_golden_table_and_recipe_temperature_limits(tmp_path):
    """``[golden]`` and a recipe's ``temperature_limits`` (read in its ``plan_unit``)."""
    cfg = load_config(write_plant_config(tmp_path / "plant.db", tmp_path))
    assert cfg.golden.false_alarm_rate == 0.02 and cfg.golden.min_batches == 5
    assert cfg.recipe("DIM-7").temperature_limits_k == pytest.approx((283.15, 355.15))
    text = (tmp_path / "sample_plant.toml").read_text()
    bad = text.replace("false_alarm_rate = 0.02", "false_alarm_rate = 1.5")
    (tmp_path / "bad.toml").write_text(bad)
    with pytest.raises(ConfigError, match="golden.false_alarm_rate"):
        load_config(tmp_path / "bad.toml")
    f = text.replace(
        'plan_unit = "degC"\ntemperature_limits = [10.0, 82.0]',
        'plan_unit = "degF"\ntemperature_limits = [50.0, 179.6]',
    )
    (tmp_path / "f.toml").write_text(f)
    assert load_config(tmp_path / "f.toml").recipe("DIM-7").temperature_limits_k == pytest.approx(
        (283.15, 355.15)
    )
