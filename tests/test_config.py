"""Config files: the schema, its documentation, the shipped examples and every kind of bad input
(in-process; the command-line side is in test_cli.py)."""

import math
import re
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from nrgsolve.config import SCHEMA, config_reference_markdown, load_config, parse_config
from nrgsolve.errors import ConfigError

ROOT = Path(__file__).resolve().parent.parent
CONFIGS = sorted((ROOT / "configs").glob("*.toml"))


def test_empty_config_gives_the_schema_defaults():
    spec = parse_config("")
    d = spec.as_dict()
    for table, keys in SCHEMA.items():
        for key, k in keys.items():
            assert d[table][key] == k.default, f"{table}.{key}"


def test_docs_config_lists_every_schema_key_and_is_up_to_date():
    """docs/config.md holds the generated reference table (regenerate: python scripts/make_docs.py)."""
    text = (ROOT / "docs" / "config.md").read_text(encoding="utf-8")
    for table, keys in SCHEMA.items():
        for key in keys:
            assert f"`{table}.{key}`" in text, f"docs/config.md lacks {table}.{key}"
    assert config_reference_markdown() in text, "docs/config.md is stale: run python scripts/make_docs.py"


def test_reference_table_has_five_columns_on_every_row():
    """Choices written 'a | b' must not break the markdown table."""
    for line in config_reference_markdown().splitlines():
        cells = re.split(r"(?<!\\)\|", line)
        assert len(cells) == 7, line       # leading and trailing empty cells + 5 columns


def test_every_config_key_used_in_the_shipped_examples_is_in_the_schema():
    assert len(CONFIGS) >= 7
    names = {p.stem for p in CONFIGS}
    for want in ("kondo", "anderson_symmetric", "anderson_asymmetric", "resonant_level",
                 "kondo_ferromagnetic", "sweep_exchange", "sweep_interaction_log"):
        assert want in names
    for path in CONFIGS:
        spec = load_config(path)               # raises on any unknown key or bad value
        text = path.read_text(encoding="utf-8")
        assert text.lstrip().startswith("#"), f"{path.name} should start with a comment saying what it shows"
        if path.stem.startswith("sweep"):
            assert spec.sweep.parameters, path.name


def test_quick_start_config_has_the_documented_settings():
    spec = load_config(ROOT / "configs" / "kondo.toml")
    assert spec.impurity.model == "kondo" and spec.impurity.exchange == 0.2
    assert spec.discretization.twists == 2 and spec.run.lowest_temperature == 1e-9


def test_log_sweep_range_is_geometric_with_the_given_ends():
    spec = load_config(ROOT / "configs" / "sweep_interaction_log.toml")
    (vals,) = spec.sweep.values
    assert spec.sweep.parameters == ("impurity.interaction",)
    assert len(vals) == 4
    assert vals[0] == pytest.approx(0.05) and vals[-1] == pytest.approx(0.4)
    ratios = [b / a for a, b in zip(vals, vals[1:])]
    assert ratios == pytest.approx([2.0] * 3)


BAD = [
    ("[run]\nkept_state = 10\n", ["run.kept_state", "did you mean 'kept_states'"]),
    ("[impurity]\nexchang = 0.1\n", ["impurity.exchang", "did you mean 'exchange'"]),
    ("[discretization]\nlambda = 2.0\n", ["discretization.lambda", "did you mean 'Lambda'"]),
    ("[bathh]\nshape = \"flat\"\n", ["[bathh]", "did you mean 'bath'"]),
    ("[discretization]\nLambda = \"three\"\n", ["discretization.Lambda", "a number"]),
    ("[discretization]\ntwists = 1.5\n", ["discretization.twists", "an integer"]),
    ("[run]\nkept_states = true\n", ["run.kept_states", "an integer"]),
    ("[discretization]\nLambda = 1.0\n", ["discretization.Lambda", ">= 1.2"]),
    ("[discretization]\nLambda = 0.5\n", ["discretization.Lambda", ">= 1.2"]),
    ("[discretization]\ntwists = 0\n", ["discretization.twists", ">= 1"]),
    ("[impurity]\nmodel = \"anderson\"\nhybridization = -0.01\n", ["impurity.hybridization", "> 0"]),
    ("[run]\nkept_states = 0\n", ["run.kept_states", ">= 1"]),
    ("[run]\nlowest_temperature = 0.0\n", ["run.lowest_temperature", "> 0"]),
    ("[run]\nlowest_temperature = -1e-6\n", ["run.lowest_temperature", "> 0"]),
    ("[run]\nlowest_temperature = 2.0\n", ["run.lowest_temperature", "half_bandwidth"]),
    ("[impurity]\nmodel = \"kondoo\"\n", ["impurity.model", "did you mean 'kondo'"]),
    ("[discretization]\nLambda = nan\n", ["discretization.Lambda"]),
    ("[bath]\nshape = \"table\"\n", ["bath.table"]),
    ("[output]\nfile = \"result.txt\"\n", ["output.file", ".h5"]),
    ("run = 3\n", ["run", "table"]),
    ("[run\nkept_states = 3\n", ["not valid TOML"]),
    ("[sweep]\n\"impurity.exchang\" = [0.1]\n", ["impurity.exchang", "did you mean 'impurity.exchange'"]),
    ("[sweep]\n\"discretization.Lambda\" = [2.0, 1.0]\n", ["discretization.Lambda", ">= 1.2"]),
    ("[sweep]\n\"impurity.interaction\" = { start = 0, stop = 1, points = 3, spacing = \"log\" }\n",
     ["impurity.interaction", "start > 0"]),
    ("[sweep]\nfolder = \"x\"\n", ["sweep", "at least one parameter"]),
]


@pytest.mark.parametrize("text,names", BAD, ids=[b[1][0] for b in BAD])
def test_bad_config_is_one_line_error_naming_the_key(text, names):
    with pytest.raises(ConfigError) as info:
        parse_config(text, "bad.toml")
    msg = str(info.value)
    assert "\n" not in msg
    for n in names:
        assert n in msg, (n, msg)


def test_missing_config_file_names_the_file(tmp_path):
    missing = tmp_path / "nowhere.toml"
    with pytest.raises(ConfigError, match="nowhere.toml"):
        load_config(missing)


def test_config_that_is_not_text_names_the_file(tmp_path):
    p = tmp_path / "binary.toml"
    p.write_bytes(b"\xff\xfe\x00\x81garbage")
    with pytest.raises(ConfigError, match="binary.toml"):
        load_config(p)


# --- property-based: nothing but ConfigError escapes parse_config -----------------------------------

def _toml_scalar(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return '"' + "".join(c if c.isalnum() or c in " ._-" else "" for c in v) + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml_scalar(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_scalar(x)}" for k, x in v.items()) + " }"
    raise TypeError(v)


KNOWN_TABLES = list(SCHEMA) + ["sweep"]
KNOWN_KEYS = sorted({k for keys in SCHEMA.values() for k in keys})
DOTTED = [f"{t}.{k}" for t in SCHEMA for k in SCHEMA[t]]
names = st.one_of(st.sampled_from(KNOWN_KEYS), st.from_regex(r"[A-Za-z_][A-Za-z0-9_]{0,12}", fullmatch=True))
scalars = st.one_of(st.integers(-10 ** 6, 10 ** 6), st.floats(allow_nan=True, allow_infinity=True),
                    st.booleans(), st.sampled_from(["kondo", "anderson", "table", "log", "flat", "abelian", "x"]),
                    st.text(max_size=8))
values = st.one_of(scalars, st.lists(scalars, max_size=4),
                   st.dictionaries(st.sampled_from(["start", "stop", "points", "spacing", "step"]), scalars,
                                   max_size=4))
table_body = st.dictionaries(names, values, max_size=5)
sweep_body = st.dictionaries(st.one_of(st.sampled_from(DOTTED + ["folder"]), names), values, max_size=3)
configs = st.dictionaries(st.one_of(st.sampled_from(KNOWN_TABLES), names), table_body, max_size=5)


def _render(tables):
    out = []
    for t, body in tables.items():
        out.append(f"[{t}]")
        for k, v in body.items():
            key = f'"{k}"' if "." in k else k
            out.append(f"{key} = {_toml_scalar(v)}")
    return "\n".join(out) + "\n"


def _check_ranges(spec):
    assert spec.discretization.Lambda > 1
    assert spec.discretization.twists >= 1
    assert spec.run.kept_states >= 1
    assert 0 < spec.run.lowest_temperature < spec.bath.half_bandwidth
    assert spec.impurity.hybridization > 0
    assert spec.impurity.interaction >= 0
    assert math.isfinite(spec.impurity.exchange)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(configs, st.one_of(st.none(), sweep_body))
def test_random_configs_raise_only_config_errors(tables, sweep):
    if sweep is not None:
        tables = dict(tables)
        tables["sweep"] = sweep
    text = _render(tables)
    try:
        spec = parse_config(text, "random.toml")
    except ConfigError as exc:
        assert "\n" not in str(exc).strip()
        return
    _check_ranges(spec)
    for vals in spec.sweep.values:
        assert len(vals) >= 1


@settings(max_examples=300, deadline=None)
@given(st.text(alphabet=st.sampled_from(list("[]{}=\"'.,#\n \tabcdeikmnorstuvxyz_0123456789+-")), max_size=80))
def test_random_toml_like_text_raises_only_config_errors(text):
    try:
        spec = parse_config(text, "random.toml")
    except ConfigError:
        return
    _check_ranges(spec)


@settings(max_examples=150, deadline=None)
@given(st.sampled_from(list(SCHEMA)), st.data())
def test_every_key_rejects_values_of_a_wrong_type(table, data):
    """A list or an inline table is never a valid value for a plain key."""
    plain = [k for k, spec in SCHEMA[table].items()
             if not (spec.kind is list or (isinstance(spec.kind, tuple) and list in spec.kind))]
    if not plain:
        return
    key = data.draw(st.sampled_from(plain))          # list-valued keys (temperatures, quantities) take lists
    bad = data.draw(st.one_of(st.lists(st.integers(0, 3), max_size=2), st.just({"a": 1})))
    text = f"[{table}]\n{key} = {_toml_scalar(bad)}\n"
    assert tomllib.loads(text)[table][key] == bad          # valid TOML: the type is what is wrong
    with pytest.raises(ConfigError, match=re.escape(f"{table}.{key}: expected")):
        parse_config(text)


def test_readme_carries_the_current_config_reference():
    """The README's config reference table is the generated one (regenerate: python scripts/make_docs.py)."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    assert config_reference_markdown() in text, "README.md config table is stale: run python scripts/make_docs.py"
