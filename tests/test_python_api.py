"""The Python interface: one validated entry point, one result type live and stored, one model registry.

What is checked here is consistency of the interface itself (the same numbers and the same messages
whichever way a run is asked for); the physics of each model is checked against published and exact
results in the other test modules.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

import nrgsolve
from nrgsolve.config import (DiscretizationSpec, ImpuritySpec, RunSpec, RunSettings, parse_config,
                             spec_from_mapping, spec_to_toml)
from nrgsolve.models import MODELS
from nrgsolve.result import QUANTITIES

from cli_helpers import run_cli

ROOT = Path(__file__).resolve().parent.parent

#: Small numerics shared by every run here: each takes a fraction of a second.
SMALL = {"kept_states": 60, "lowest_temperature": 1e-3, "workers": 1, "flow_levels": 10}

#: Each model with parameters of its own (the registry must hold exactly these five).
MODEL_PARAMETERS = {
    "kondo": {"exchange": 0.25},
    "spin-kondo": {"exchange": 0.25, "spin": 1.0},
    "two-channel-kondo": {"exchange": 0.3, "exchange_second_channel": 0.25},
    "anderson": {"interaction": 0.3, "hybridization": 0.03, "level": -0.1},
    "resonant-level": {"hybridization": 0.03, "level": 0.01},
}


def _mapping(model: str) -> dict:
    return {"impurity": {"model": model, **MODEL_PARAMETERS[model]}, "run": dict(SMALL),
            "discretization": {"twists": 1}}


def _toml(mapping: dict) -> str:
    return spec_to_toml(spec_from_mapping(mapping))


def test_the_registry_holds_every_model_and_the_config_reads_it():
    assert sorted(MODELS) == sorted(MODEL_PARAMETERS)
    from nrgsolve.config import SCHEMA
    assert SCHEMA["impurity"]["model"].choices == tuple(MODELS)
    for name in MODELS:
        for key, decl in MODELS[name].parameters.items():
            assert SCHEMA["impurity"][key] is decl          # one declaration, read by the schema


@pytest.mark.parametrize("model", sorted(MODEL_PARAMETERS))
def test_every_model_gives_the_same_numbers_from_python_and_from_a_file(model, tmp_path):
    """nrgsolve.run on a mapping and on the same config written to a file: identical arrays."""
    mapping = _mapping(model)
    live = nrgsolve.run(mapping)
    path = tmp_path / f"{model}.toml"
    path.write_text(_toml(mapping))
    from_file = nrgsolve.run(path)
    assert live.same_data(from_file)
    assert live.spec.impurity == from_file.spec.impurity
    assert live.thermo.temperature.size > 5 and np.all(np.isfinite(live.thermo.T_chi))


def test_a_file_written_by_the_command_line_loads_to_the_result_of_run(tmp_path):
    """nrgsolve.load of `nrgsolve run`'s file equals nrgsolve.run on the same config, array for array; and
    a Result saved from Python loads back equal in every respect (provenance included)."""
    mapping = _mapping("anderson")
    (tmp_path / "a.toml").write_text(_toml(mapping))
    proc = run_cli("run", "a.toml", "-o", "a.h5", "-q", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    stored = nrgsolve.load(tmp_path / "a.h5")
    live = nrgsolve.run(tmp_path / "a.toml")
    assert stored.same_data(live)
    for group in ("thermo", "flow", "diagnostics", "chain"):
        for name in getattr(live, group):
            a, b = getattr(live, group)[name], getattr(stored, group)[name]
            assert a.dtype == b.dtype and np.array_equal(a, b, equal_nan=a.dtype.kind == "f"), (group, name)
    saved = live.save(tmp_path / "b.h5")
    assert nrgsolve.load(saved) == live
    with pytest.raises(nrgsolve.NrgInputError, match="already exists; pass overwrite=True"):
        live.save(tmp_path / "b.h5")
    live.save(tmp_path / "b.h5", overwrite=True)


BAD = [
    # (table, key, value, the one-line message)
    ("impurity", "exchange", "abc", "impurity.exchange: expected a number, got str 'abc'"),
    ("discretization", "Lambda", 0.5, "discretization.Lambda: got 0.5; allowed range: >= 1.2 and <= 10"),
    ("impurity", "model", "kondoo", "impurity.model: got 'kondoo'; allowed: "),
    ("run", "kept_states", 0, "run.kept_states: got 0; allowed range: >= 1"),
]


def _spec_object(table, key, value):
    kinds = {"impurity": ImpuritySpec, "discretization": DiscretizationSpec, "run": RunSettings}
    sub = kinds[table](**{key: value})
    return RunSpec(**{table: sub})


@pytest.mark.parametrize("table, key, value, message", BAD)
def test_the_same_bad_input_gives_the_same_message_as_file_mapping_and_object(table, key, value, message, tmp_path):
    text = f"[{table}]\n{key} = {value!r}\n".replace("'", '"')
    path = tmp_path / "bad.toml"
    path.write_text(text)
    messages = []
    for attempt in (lambda: nrgsolve.run(path), lambda: nrgsolve.run({table: {key: value}}),
                    lambda: _spec_object(table, key, value)):
        with pytest.raises(nrgsolve.ConfigError) as info:
            attempt()
        messages.append(str(info.value))
    assert messages[0] == messages[1] == messages[2]
    assert messages[0].startswith(message) and "\n" not in messages[0]
    proc = run_cli("run", "bad.toml", cwd=tmp_path)
    assert proc.returncode == 2 and proc.stderr.strip() == f"nrgsolve: error: {messages[0]}"


def test_a_key_the_model_does_not_use_is_refused_naming_the_model_and_its_keys(tmp_path):
    want = ('impurity.spin: not used by model "kondo"; remove it ("kondo" uses exchange, potential_scattering, '
            'field)')
    for attempt in (lambda: nrgsolve.run({"impurity": {"model": "kondo", "spin": 1.5}}),
                    lambda: parse_config('[impurity]\nmodel = "kondo"\nspin = 1.5\n'),
                    lambda: ImpuritySpec(model="kondo", spin=1.5)):
        with pytest.raises(nrgsolve.ConfigError) as info:
            attempt()
        assert str(info.value) == want
    with pytest.raises(nrgsolve.ConfigError, match='impurity.interaction: not used by model "resonant-level"'):
        nrgsolve.as_spec({"impurity": {"model": "resonant-level", "interaction": 0.2}})


def test_spec_objects_cannot_be_invalid_and_with_value_validates():
    spec = RunSpec(impurity=ImpuritySpec(model="kondo", exchange=0.2))
    with pytest.raises(nrgsolve.ConfigError, match="impurity.exchange: expected a number"):
        spec.with_value("impurity.exchange", "abc")
    with pytest.raises(nrgsolve.ConfigError, match="discretization.Lambda: got 0.5"):
        spec.with_value("discretization.Lambda", 0.5)
    with pytest.raises(nrgsolve.ConfigError, match="did you mean 'impurity.exchange'"):
        spec.with_value("impurity.exchnge", 0.3)
    assert spec.with_value("impurity.exchange", 0.3).impurity.exchange == 0.3
    # a spec built in Python carries a config text that parses back to itself
    assert parse_config(spec.config_text).impurity == spec.impurity


def test_a_bath_table_given_as_arrays_equals_the_same_table_from_a_file(tmp_path):
    energy = np.linspace(-1.0, 1.0, 21)
    values = 1.0 - 0.4 * energy
    (tmp_path / "g.dat").write_text("".join(f"{float(e)!r} {float(v)!r}\n" for e, v in zip(energy, values)))
    base = _mapping("kondo")
    from_arrays = nrgsolve.run({**base, "bath": {"shape": "table", "table": {"energies": energy, "values": values}}})
    from_file = nrgsolve.run({**base, "bath": {"shape": "table", "table": str(tmp_path / "g.dat")}})
    np.testing.assert_array_equal(from_arrays.thermo.T_chi, from_file.thermo.T_chi)
    np.testing.assert_array_equal(from_arrays.chain.hopping, from_file.chain.hopping)
    with pytest.raises(nrgsolve.NrgInputError, match=r"bath.table\[3\]: hybridization value -1.0 < 0"):
        nrgsolve.as_spec({"bath": {"shape": "table", "table": {"energies": energy, "values": np.r_[1, 1, 1, -1.0,
                                                                                                   values[4:]]}}})


def test_every_stored_quantity_is_in_the_table_and_carries_its_unit(tmp_path):
    """Storage writes the units of the one table; a live result holds only names the table knows."""
    import h5py
    res = nrgsolve.run(_mapping("anderson"))
    path = res.save(tmp_path / "r.h5")
    known = {(q.group, q.name) for q in QUANTITIES}
    with h5py.File(path) as h:
        for group in ("thermo", "flow", "diagnostics", "chain"):
            for name in getattr(res, group):
                assert (group, name) in known, (group, name)
                q = nrgsolve.result.quantity(group, name)
                assert h[f"{nrgsolve.result.GROUP_PATHS[group]}/{q.dataset}"].attrs["units"] == q.unit


def test_plots_take_live_results_and_paths_and_draw_into_given_axes(tmp_path):
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib.figure import Figure
    res = nrgsolve.run(_mapping("kondo"))
    path = res.save(tmp_path / "k.h5")
    fig = Figure()
    ax = fig.subplots()
    out = nrgsolve.plot_thermo([res, path], "entropy", ax=ax)
    assert out is fig and len(ax.get_lines()) == 2
    np.testing.assert_array_equal(ax.get_lines()[0].get_ydata(), ax.get_lines()[1].get_ydata())
    with pytest.raises(nrgsolve.NrgInputError, match="results: expected a Result or the path"):
        nrgsolve.plot_thermo([42])


def test_public_names_are_listed_and_documented():
    for name in nrgsolve.__all__:
        obj = getattr(nrgsolve, name)
        if callable(obj) and not isinstance(obj, type(nrgsolve.ConfigError)):
            assert obj.__doc__, name
    for fn in (nrgsolve.run, nrgsolve.load, nrgsolve.as_spec):
        assert "Parameters" in fn.__doc__ and "Returns" in fn.__doc__


def test_the_python_guide_runs(tmp_path, monkeypatch):
    """Every code block of docs/python.md, in order, in a fresh folder (the guide cannot rot)."""
    monkeypatch.chdir(tmp_path)
    text = (ROOT / "docs" / "python.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, re.S)
    assert len(blocks) >= 6
    namespace = {"__name__": "__main__"}
    for k, block in enumerate(blocks):
        exec(compile(block, f"docs/python.md block {k + 1}", "exec"), namespace)
    assert (tmp_path / "kondo.h5").is_file() and (tmp_path / "compare.png").is_file()
    assert (ROOT / "README.md").read_text().count("docs/python.md") >= 1


def test_generated_docs_are_current():
    """docs/config.md lists the registry's models and docs/results.md the quantity table (regenerate:
    python scripts/make_docs.py)."""
    from nrgsolve.config import models_markdown
    from nrgsolve.result import quantities_markdown
    assert models_markdown() in (ROOT / "docs" / "config.md").read_text(encoding="utf-8")
    assert quantities_markdown() in (ROOT / "docs" / "results.md").read_text(encoding="utf-8")


def test_the_examples_in_the_public_docstrings_run():
    """The Examples sections of the public interface are doctests that pass."""
    import doctest
    import matplotlib
    matplotlib.use("Agg")
    import nrgsolve.api
    import nrgsolve.chain
    import nrgsolve.config
    import nrgsolve.plots
    import nrgsolve.result
    for module in (nrgsolve.api, nrgsolve.result, nrgsolve.config, nrgsolve.chain, nrgsolve.plots):
        failed, tried = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
        assert failed == 0 and tried >= 2, module.__name__
