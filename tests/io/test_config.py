"""Input files: the schema validates, refuses bad input with a clear message, and drives the core."""

from __future__ import annotations

import copy
import tomllib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from pydantic import BaseModel

import beadmd as bm
from beadmd import ConfigError
from beadmd.cli import main
from beadmd.io.config import (
    PairSettings,
    RunConfig,
    build_simulation,
    load_config,
    option_rows,
    options_reference,
    parse_config,
    run_stages,
)

INPUTS = sorted((Path(__file__).parents[2] / "inputs").glob("*.toml"))


def shrink(document: dict) -> dict:
    """A copy of an input document with a tiny system, so that it builds and steps fast."""
    doc = copy.deepcopy(document)
    system = doc.setdefault("system", {})
    if system.get("space") == "periodic":
        system.update(chains=3, beads_per_chain=9)  # 27 beads: a 3 x 3 x 3 lattice at rho = 0.85
    else:
        system.update(chains=2, beads_per_chain=8)
    if "B" in system.get("block_pattern", "A"):
        system["block_pattern"] = "A4B4"
    return doc


def test_the_examples_are_there():
    assert len(INPUTS) >= 6


@pytest.mark.parametrize("path", INPUTS, ids=lambda p: p.stem)
def test_every_example_loads_builds_and_advances(path):
    config = load_config(path)
    assert isinstance(config, RunConfig)
    small = parse_config(shrink(tomllib.loads(path.read_text())), source=path.name)
    sim, stages = build_simulation(small)
    assert [s.name for s in stages] == ["push_off", "equilibration", "production"]
    assert all(s.steps >= 0 for s in stages)
    assert sim.system.dimension == small.system.dimension
    assert sim.system.n_beads == small.system.chains * small.system.beads_per_chain
    sim.advance(20)
    assert sim.step == 20
    assert np.isfinite(sim.system.positions).all()


def test_an_empty_file_is_a_complete_run(tmp_path):
    path = tmp_path / "empty.toml"
    path.write_text("")
    config = load_config(path)
    assert config.system.dimension == 3 and config.bonds.kind == "fene"
    assert [s.steps for s in run_stages(config)] == [0, 10_000, 100_000]


def test_duration_is_converted_with_the_stage_time_step():
    config = parse_config(
        {
            "integrator": {"time_step": 0.005},
            "stages": {"production": {"duration": 10.0}, "push_off": {"duration": 1.0, "time_step": 0.001}},
        }
    )
    stages = {s.name: s for s in run_stages(config)}
    assert stages["production"].steps == 2000 and stages["production"].time_step == 0.005
    assert stages["push_off"].steps == 1000 and stages["push_off"].force_cap == 20.0


def test_two_species_get_their_pattern_and_mixed_pair():
    config = parse_config(
        {
            "system": {"chains": 2, "beads_per_chain": 6, "block_pattern": "A2B1"},
            "pairs": {"AA": {"sigma": 1.0}, "BB": {"sigma": 1.4}},
        }
    )
    sim, _ = build_simulation(config)
    assert sim.system.types.tolist() == [0, 0, 1, 0, 0, 1] * 2
    assert sim.field.pairs[(0, 1)] == bm.WCA(sigma=1.2, epsilon=1.0)  # Lorentz-Berthelot


def test_malformed_toml_names_the_file_and_line(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("[system]\ndimension = 3\nchains = = 4\n")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert "broken.toml" in str(info.value) and "line 3" in str(info.value)


def test_a_missing_file_is_a_config_error(tmp_path):
    with pytest.raises(ConfigError, match="cannot read"):
        load_config(tmp_path / "nowhere.toml")


MELT = {"space": "periodic", "conformation": "lattice", "chains": 100, "beads_per_chain": 10}

BAD_INPUTS = [
    # (document, fragments the message must contain)
    ({"sytem": {}}, ["'sytem'", "did you mean 'system'"]),
    ({"system": {"beads_per_chian": 8}}, ["system.beads_per_chian", "did you mean 'system.beads_per_chain'"]),
    ({"pairs": {"AA": {"sigam": 1.0}}}, ["pairs.AA.sigam", "did you mean 'pairs.AA.sigma'"]),
    ({"system": {"dimension": 5}}, ["system.dimension = 5", "an integer in 1..4"]),
    ({"system": {"dimension": "3"}}, ["system.dimension = '3'", "an integer"]),
    ({"system": {"chains": True}}, ["system.chains = True", "an integer"]),
    ({"system": {"space": "box"}}, ["system.space = 'box'", "'open', 'periodic'"]),
    (
        {"system": {"block_pattern": "A1B1"}, "pairs": {"AB": {"sigma": -1.0}}},
        ["pairs.AB.sigma = -1.0", "> 0"],
    ),
    (
        {"pairs": {"AA": {"attraction": 1.5, "form": "wca-cosine-tail"}}},
        ["pairs.AA.attraction = 1.5", "in [0, 1]"],
    ),
    ({"integrator": {"time_step": float("nan")}}, ["integrator.time_step = nan", "finite number"]),
    ({"integrator": {"time_step": 0.5}}, ["integrator.time_step = 0.5", "<= 0.05"]),
    ({"system": {"density": 0.5}}, ["system.density = 0.5", "only with system.space = 'periodic'"]),
    ({"system": {**MELT, "density": 1.5}}, ["system.density = 1.5", "<= 1.2"]),
    (
        {"system": {**MELT, "chains": 1, "beads_per_chain": 5, "density": 0.85}},
        ["system.density = 0.85", "twice the interaction range"],
    ),
    ({"system": {**MELT, "density": 0.3}}, ["system.density = 0.3", "lattice spacing"]),
    ({"bonds": {"max_extension": 0.9}}, ["bonds.max_extension = 0.9", "equilibrium", "0.97"]),
    ({"bonds": {"kind": "harmonic", "max_extension": 2.0}}, ["bonds.max_extension = 2.0", "'fene'"]),
    ({"system": {"conformation": "random-walk"}}, ["stages.push_off.steps = 0", "> 0", "overlap"]),
    ({"system": {"conformation": "lattice"}}, ["system.conformation = 'lattice'", "open space"]),
    (
        {"system": {"beads_per_chain": 10, "block_pattern": "A4B4"}},
        ["system.block_pattern = 'A4B4'", "divides"],
    ),
    ({"system": {"block_pattern": "A4C4"}}, ["system.block_pattern = 'A4C4'", "blocks of A and B"]),
    ({"pairs": {"BB": {"sigma": 1.5}}}, ["pairs.BB", "has none"]),
    ({"pairs": {"AA": {"cutoff": 3.0}}}, ["pairs.AA.cutoff = 3.0", "'lennard-jones'"]),
    ({"pairs": {"AA": {"form": "lennard-jones", "cutoff": 1.0}}}, ["pairs.AA.cutoff = 1.0", "2^(1/6)"]),
    (
        {"stages": {"production": {"steps": 10, "duration": 1.0}}},
        ["stages.production.duration = 1.0", "either steps or duration"],
    ),
    (
        {"integrator": {"method": "velocity-verlet", "friction": 1.0}},
        ["integrator.friction", "langevin-baoab"],
    ),
    ({"output": {"units": {"sigma": "0.5 furlong"}}}, ["output.units.sigma", "nm"]),
    ({"output": {"units": {"sigma": "0.5 nm"}}}, ["output.units.tau = None", "epsilon and mass"]),
    (
        {"output": {"units": {"sigma": "0.5 nm", "tau": "2 ps", "mass": "72 u", "epsilon": "1 kJ mol-1"}}},
        ["output.units.tau", "contradicts"],
    ),
    ({"output": {"velocities": "yes"}}, ["output.velocities = 'yes'", "true or false"]),
    ({"system": 3}, ["system = 3", "a table"]),
    ({"seed": -1}, ["seed = -1", "0..2^64 - 1"]),
    ({"threads": 100_000}, ["threads = 100000", "0..4096"]),
]


@pytest.mark.parametrize(("document", "fragments"), BAD_INPUTS, ids=lambda v: str(v)[:40])
def test_bad_input_is_refused_with_key_value_and_allowed(document, fragments):
    with pytest.raises(ConfigError) as info:
        parse_config(document, source="bad.toml")
    message = str(info.value)
    assert message.startswith("bad.toml: ")
    assert "\n" not in message
    for fragment in fragments:
        assert fragment in message, (fragment, message)


# -- random documents: a RunConfig or a ConfigError, never anything else -------------------
def _schema_keys(model=RunConfig) -> dict:
    """Nested dict of the schema's keys (section -> keys), the vocabulary of the fuzzer."""
    out = {}
    for key, field in model.model_fields.items():
        annotation = field.annotation
        args = getattr(annotation, "__args__", (annotation,))
        sub = next((a for a in args if isinstance(a, type) and issubclass(a, BaseModel)), None)
        out[key] = _schema_keys(sub) if sub is not None else None
    return out


SCHEMA = _schema_keys()
scalars = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(2**70), max_value=2**70),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0, 1, 2, 3, 4, 8, 0.0, 0.5, 0.85, 0.97, 1.0, 1.5, 2.5, 1e9]),
    st.text(max_size=8),
    st.sampled_from(
        [
            "open",
            "periodic",
            "lattice",
            "random-walk",
            "self-avoiding",
            "A1B1",
            "A2B2",
            "fene",
            "harmonic",
            "none",
            "wca",
            "lennard-jones",
            "wca-cosine-tail",
            "bonded",
            "velocity-verlet",
            "0.5 nm",
            "2 ps",
        ]
    ),
    st.lists(st.integers(), max_size=3),
)


def _documents(schema: dict, depth: int = 0):
    keys = st.sampled_from(sorted(schema)) | st.text(min_size=1, max_size=6)

    def value_for(key):
        sub = schema.get(key) if isinstance(key, str) else None
        if sub is not None and depth < 3:
            return _documents(sub, depth + 1) | scalars
        return scalars

    return st.lists(keys, max_size=5, unique=True).flatmap(
        lambda ks: st.fixed_dictionaries({k: value_for(k) for k in ks})
    )


@settings(max_examples=200, deadline=None)
@given(_documents(SCHEMA))
def test_random_documents_give_a_config_or_a_config_error(document):
    try:
        config = parse_config(document)
    except ConfigError as error:
        assert str(error)
    else:
        assert isinstance(config, RunConfig)


# -- the options reference -------------------------------------------------------------------
def _leaves(model=RunConfig, section="") -> set[tuple[str, str]]:
    found = set()
    for key, field in model.model_fields.items():
        args = getattr(field.annotation, "__args__", (field.annotation,))
        sub = next((a for a in args if isinstance(a, type) and issubclass(a, BaseModel)), None)
        if sub is None:
            found.add((section or "(top level)", key))
        else:
            name = f"{section}.{key}" if section else key
            if sub is PairSettings:
                name = f"{section}.AA|AB|BB"
            found |= _leaves(sub, name)
    return found


def test_options_lists_every_key_of_the_schema(capsys):
    assert main(["options"]) == 0
    out = capsys.readouterr().out
    assert out == options_reference()
    # Each section's block of the printed reference holds each of its keys.
    blocks = {}
    current = None
    for line in out.splitlines():
        if line and not line.startswith(" "):
            current = line.split("  #")[0].strip("[]")
            blocks[current] = []
        elif line.startswith("  ") and not line.startswith("    ") and current is not None:
            blocks[current].append(line.split(":")[0].strip())
    expected = _leaves()
    assert {(r.section, r.key) for r in option_rows()} == expected
    for section, key in expected:
        assert key in blocks[section], (section, key)
    assert all(r.description and r.default and r.allowed for r in option_rows())
