"""Input files: one schema for validation, defaults and the options reference.

An input file is TOML (read with the standard library's :mod:`tomllib`) with these
sections; every key has a default, so an empty file is a valid run:

* top level: ``title``, ``seed``, ``threads``;
* ``[system]``: dimension, open space (independent replicas) or a periodic box at a
  bead density, number of chains, beads per chain, starting conformation, block pattern
  of the two bead species A and B;
* ``[bonds]``, ``[bending]``: the spring between consecutive beads and the optional
  bending stiffness;
* ``[pairs]``: exclusions, and one table per species pair (``[pairs.AA]``,
  ``[pairs.AB]``, ``[pairs.BB]``) with its form and parameters;
* ``[integrator]``, ``[neighbour_list]``;
* ``[stages.push_off]``, ``[stages.equilibration]``, ``[stages.production]``: length
  (steps or duration) and recording intervals;
* ``[output]`` and ``[output.units]``.

:func:`load_config` and :func:`parse_config` return a frozen :class:`RunConfig` or raise
:class:`~beadmd.errors.ConfigError` naming the key path, the value and what is allowed;
no other exception escapes them. :func:`build_simulation` turns a configuration into a
:class:`~beadmd.simulate.Simulation` and the resolved :class:`Stage` list;
:func:`options_reference` is the text that ``beadmd options`` prints.
"""

from __future__ import annotations

import difflib
import math
import tomllib
import types
import typing
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import annotated_types
import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from ..errors import ConfigError

SPECIES = ("A", "B")
SPECIES_PAIRS = ("AA", "AB", "BB")
# Highest bead density (sigma^-d) at which beads can still be placed without deep
# overlaps: close packing of unit spheres is 1, 1.155, 1.414 and 2 for d = 1..4; a
# liquid needs room below it (a Kremer-Grest melt is 0.85 in 3D).
MAX_DENSITY = {1: 1.1, 2: 1.0, 3: 1.2, 4: 1.5}
MAX_BEADS = 50_000_000
_WCA_RANGE = 2.0 ** (1.0 / 6.0)
_MAX_ERRORS_SHOWN = 4


class _Section(BaseModel):
    """Base of every section: strict types, unknown keys refused, frozen, no NaN or inf."""

    model_config = ConfigDict(strict=True, extra="forbid", frozen=True, allow_inf_nan=False)


def _allowed(text: str) -> dict:
    """``json_schema_extra`` carrying a hand-written 'allowed' text for the reference."""
    return {"allowed": text}


# -- the schema ----------------------------------------------------------------------------
class SystemSettings(_Section):
    """The beads and chains, the space they live in and how the chains start."""

    dimension: int = Field(3, ge=1, le=4, description="spatial dimension d")
    space: Literal["open", "periodic"] = Field(
        "open",
        description="'open': independent replicas of an isolated chain (dilute limit, replicas never "
        "interact); 'periodic': all chains together in a periodic box",
    )
    chains: int = Field(
        1, ge=1, le=MAX_BEADS, description="number of chains (in open space: independent replicas)"
    )
    beads_per_chain: int = Field(32, ge=1, le=MAX_BEADS, description="chain length N in beads")
    density: float = Field(
        0.85,
        gt=0,
        description="bead density in sigma^-d that sets the periodic box edge (periodic space only)",
    )
    conformation: Literal["self-avoiding", "random-walk", "lattice"] = Field(
        "self-avoiding",
        description="starting chains: self-avoiding growth, random walk, or a serpentine path on a "
        "cubic lattice (periodic space only, no overlaps)",
    )
    bond_length: float = Field(
        0.97, gt=0, le=2.0, description="bond length of the grown chains (sigma); ignored on the lattice"
    )
    closest_approach: float = Field(
        0.9,
        ge=0,
        description="self-avoiding growth rejects a bead closer than this to an earlier bead of its chain "
        "(sigma)",
    )
    block_pattern: str = Field(
        "A",
        description="species along each chain as blocks of A and B beads, e.g. 'A16B16' (diblock) or 'A1B1' "
        "(alternating); repeated to fill the chain",
        json_schema_extra=_allowed("blocks 'A<n>' / 'B<n>' whose total length divides beads_per_chain"),
    )


class BondSettings(_Section):
    """The spring between consecutive beads of a chain."""

    kind: Literal["fene", "harmonic", "none"] = Field(
        "fene",
        description="'fene': finitely extensible spring (Kremer-Grest); 'harmonic': (k/2)(r - r0)^2; "
        "'none': no bonds",
    )
    stiffness: float = Field(30.0, gt=0, description="spring constant k (epsilon / sigma^2)")
    max_extension: float = Field(1.5, gt=0, description="FENE length R0 at which the bond breaks (sigma)")
    rest_length: float = Field(
        0.0, ge=0, description="harmonic rest length r0 (sigma); 0 is the Gaussian chain"
    )


class BendingSettings(_Section):
    """Bending stiffness between successive bonds, U = k_theta (1 - cos theta)."""

    stiffness: float = Field(0.0, ge=0, description="bending stiffness k_theta (epsilon); 0 switches it off")


class PairSettings(_Section):
    """Non-bonded interaction of one species pair."""

    form: Literal["wca", "lennard-jones", "wca-cosine-tail", "none"] = Field(
        "wca",
        description="'wca': pure repulsion (good solvent); 'lennard-jones': cut and shifted LJ; "
        "'wca-cosine-tail': WCA plus a tunable cosine attraction; 'none': no interaction",
    )
    sigma: float = Field(1.0, gt=0, le=10.0, description="bead overlap diameter sigma of the pair")
    epsilon: float = Field(1.0, ge=0, le=1000.0, description="interaction strength epsilon")
    attraction: float = Field(
        0.0,
        ge=0,
        le=1,
        description="depth of the cosine tail in epsilon (lambda; 'wca-cosine-tail' only): 0 good "
        "solvent, larger is poorer",
    )
    cutoff: float | None = Field(
        None,
        gt=0,
        le=25.0,
        description="cutoff of the Lennard-Jones form (sigma); unset: 2.5 sigma",
    )


class PairsSettings(_Section):
    """Non-bonded interactions: exclusions and one table per species pair."""

    exclusions: Literal["none", "bonded"] = Field(
        "none",
        description="'none': pair forces act between bonded beads too (Kremer-Grest); 'bonded': directly "
        "bonded beads feel only their bond",
    )
    AA: PairSettings = Field(default_factory=PairSettings, description="A-A pair")
    AB: PairSettings | None = Field(
        None, description="A-B pair; unset: Lorentz-Berthelot mixing of AA and BB (same form)"
    )
    BB: PairSettings | None = Field(None, description="B-B pair; unset: the same as AA")


class IntegratorSettings(_Section):
    """Equations of motion and their time step."""

    method: Literal["langevin-baoab", "velocity-verlet"] = Field(
        "langevin-baoab",
        description="'langevin-baoab': Langevin dynamics (implicit solvent); 'velocity-verlet': constant "
        "energy",
    )
    time_step: float = Field(0.01, gt=0, le=0.05, description="time step (tau)")
    friction: float = Field(0.5, ge=0, le=1000.0, description="Langevin friction gamma (1/tau)")
    temperature: float = Field(
        1.0,
        ge=0,
        le=100.0,
        description="heat-bath temperature kT (epsilon); also draws the starting velocities",
    )


class NeighbourListSettings(_Section):
    """Verlet list: which pairs the force loop looks at."""

    skin: float = Field(
        0.4,
        ge=0,
        le=5.0,
        description="extra range of the Verlet list (sigma); rebuilt when a bead moved more than skin/2",
    )
    search: Literal["auto", "cells", "brute-force"] = Field(
        "auto",
        description="list build: cell grid, all pairs, or 'auto' (all pairs below 64 beads)",
    )


class _Stage(_Section):
    """One stage of a run: its length and how often it records."""

    steps: int = Field(0, ge=0, le=10**12, description="length in time steps")
    duration: float | None = Field(
        None, ge=0, le=1e12, description="length in tau instead of steps (rounded up to whole steps)"
    )
    frame_interval: int = Field(0, ge=0, description="steps between trajectory frames; 0: none")
    log_interval: int = Field(0, ge=0, description="steps between thermodynamic log lines; 0: none")
    checkpoint_interval: int = Field(0, ge=0, description="steps between checkpoints; 0: only at the end")


class PushOffStage(_Stage):
    """Overlap removal before equilibration: pair forces capped, the cap raised to the full potentials."""

    steps: int = Field(0, ge=0, le=10**12, description="length in time steps; 0 skips the push-off")
    log_interval: int = Field(100, ge=0, description="steps between thermodynamic log lines; 0: none")
    force_cap: float = Field(
        20.0,
        gt=0,
        le=1e6,
        description="largest pair force (epsilon/sigma) at the start; raised step by step until the "
        "production potentials act uncapped at the end",
    )
    time_step: float | None = Field(
        None, gt=0, le=0.05, description="time step of the push-off (tau); unset: the integrator's"
    )


class EquilibrationStage(_Stage):
    """Relaxation with the production potentials; its data are not analysed."""

    steps: int = Field(10_000, ge=0, le=10**12, description="length in time steps")
    log_interval: int = Field(100, ge=0, description="steps between thermodynamic log lines; 0: none")


class ProductionStage(_Stage):
    """The stage whose trajectory is analysed."""

    steps: int = Field(100_000, ge=0, le=10**12, description="length in time steps")
    frame_interval: int = Field(1000, ge=0, description="steps between trajectory frames; 0: none")
    log_interval: int = Field(100, ge=0, description="steps between thermodynamic log lines; 0: none")
    checkpoint_interval: int = Field(
        10_000, ge=0, description="steps between checkpoints; 0: only at the end"
    )


class StagesSettings(_Section):
    """The stages of a run, in this order."""

    push_off: PushOffStage = Field(default_factory=PushOffStage, description="push-off stage")
    equilibration: EquilibrationStage = Field(
        default_factory=EquilibrationStage, description="equilibration stage"
    )
    production: ProductionStage = Field(default_factory=ProductionStage, description="production stage")


class UnitsSettings(_Section):
    """Optional physical units: what one reduced unit is (recorded, and used in the trajectory)."""

    sigma: str | None = Field(
        None,
        description="sigma as 'scale unit', e.g. '0.5 nm'",
        json_schema_extra=_allowed("'<scale> nm|pm|fm'"),
    )
    epsilon: str | None = Field(
        None,
        description="epsilon, e.g. '2.5 kJ mol-1'",
        json_schema_extra=_allowed("'<scale> kJ mol-1|kcal mol-1'"),
    )
    mass: str | None = Field(
        None, description="bead mass m, e.g. '72 u'", json_schema_extra=_allowed("'<scale> u|g mol-1'")
    )
    tau: str | None = Field(
        None,
        description="time unit tau; unset: derived as sigma sqrt(m / epsilon)",
        json_schema_extra=_allowed("'<scale> fs|ps|ns|s'"),
    )


class OutputSettings(_Section):
    """The run directory and what goes into it."""

    directory: str = Field(
        "beadmd-run",
        min_length=1,
        description="run directory (created; never overwritten)",
        json_schema_extra=_allowed("a non-empty path"),
    )
    velocities: bool = Field(False, description="store velocities with every trajectory frame")
    units: UnitsSettings = Field(default_factory=UnitsSettings, description="physical units")


class RunConfig(_Section):
    """A whole run, as read from an input file."""

    title: str = Field("", description="free text describing the run, recorded in the metadata")
    seed: int = Field(
        1,
        ge=0,
        lt=2**64,
        description="seed of the starting conformation, the velocities and the noise",
        json_schema_extra=_allowed("an integer in 0..2^64 - 1"),
    )
    threads: int = Field(0, ge=0, le=4096, description="Numba threads; 0: all (NUMBA_NUM_THREADS)")
    system: SystemSettings = Field(default_factory=SystemSettings, description="system")
    bonds: BondSettings = Field(default_factory=BondSettings, description="bonds")
    bending: BendingSettings = Field(default_factory=BendingSettings, description="bending")
    pairs: PairsSettings = Field(default_factory=PairsSettings, description="pairs")
    integrator: IntegratorSettings = Field(default_factory=IntegratorSettings, description="integrator")
    neighbour_list: NeighbourListSettings = Field(
        default_factory=NeighbourListSettings, description="neighbour list"
    )
    stages: StagesSettings = Field(default_factory=StagesSettings, description="stages")
    output: OutputSettings = Field(default_factory=OutputSettings, description="output")


# -- walking the schema --------------------------------------------------------------------
def _section_model(annotation) -> type[_Section] | None:
    """The section class inside ``annotation`` (``X`` or ``X | None``), or None for a plain key."""
    candidates = typing.get_args(annotation) if _is_union(annotation) else (annotation,)
    for c in candidates:
        if isinstance(c, type) and issubclass(c, _Section):
            return c
    return None


def _is_union(annotation) -> bool:
    return typing.get_origin(annotation) in (typing.Union, types.UnionType)


def _type_name(annotation) -> str:
    names = {int: "integer", float: "float", str: "string", bool: "boolean"}
    if typing.get_origin(annotation) is Literal:
        return "string"
    if _is_union(annotation):
        return " or ".join(_type_name(a) for a in typing.get_args(annotation) if a is not type(None))
    return names.get(annotation, getattr(annotation, "__name__", str(annotation)))


def _bound_text(field) -> str:
    low = high = None
    for m in field.metadata:
        if isinstance(m, annotated_types.Gt):
            low = ("> ", m.gt)
        elif isinstance(m, annotated_types.Ge):
            low = (">= ", m.ge)
        elif isinstance(m, annotated_types.Lt):
            high = ("< ", m.lt)
        elif isinstance(m, annotated_types.Le):
            high = ("<= ", m.le)
    if low and high and low[0] == ">= " and high[0] == "<= ":
        return f"in {low[1]}..{high[1]}" if field.annotation is int else f"in [{low[1]:g}, {high[1]:g}]"
    return ", ".join(f"{b[0]}{b[1]:g}" for b in (low, high) if b)


def allowed_text(field) -> str:
    """What a key accepts, in words (used by both the error messages and the reference)."""
    extra = field.json_schema_extra
    if isinstance(extra, dict) and "allowed" in extra:
        return str(extra["allowed"])
    annotation = field.annotation
    if _is_union(annotation):
        annotation = next(a for a in typing.get_args(annotation) if a is not type(None))
    if typing.get_origin(annotation) is Literal:
        return "one of " + ", ".join(repr(a) for a in typing.get_args(annotation))
    kind = {int: "an integer", float: "a finite number", str: "a string", bool: "true or false"}.get(
        annotation, _type_name(annotation)
    )
    bounds = _bound_text(field)
    return f"{kind} {bounds}" if bounds else kind


def _default_text(field) -> str:
    if field.default_factory is not None:
        return "(table)"
    value = field.default
    if value is None:
        return "unset"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return repr(value)
    return f"{value:g}" if isinstance(value, float) else str(value)


@dataclass(frozen=True)
class OptionRow:
    """One key of the schema in the options reference."""

    section: str
    key: str
    type: str
    default: str
    allowed: str
    description: str


def option_rows() -> list[OptionRow]:
    """Every key of the schema, section by section, as :class:`OptionRow` records.

    The three species-pair tables share one model and appear once, as section
    ``pairs.AA|AB|BB``.
    """
    rows: list[OptionRow] = []

    def walk(model: type[_Section], section: str) -> None:
        nested = []
        for key, field in model.model_fields.items():
            sub = _section_model(field.annotation)
            if sub is not None:
                nested.append((key, sub))
                continue
            rows.append(
                OptionRow(
                    section or "(top level)",
                    key,
                    _type_name(field.annotation),
                    _default_text(field),
                    allowed_text(field),
                    field.description or "",
                )
            )
        done = set()
        for key, sub in nested:
            if sub in done:
                continue
            done.add(sub)
            name = f"{section}.{key}" if section else key
            if sub is PairSettings:
                name = f"{section}." + "|".join(SPECIES_PAIRS)
            walk(sub, name)

    walk(RunConfig, "")
    return rows


def _section_notes() -> dict[str, str]:
    notes = {"(top level)": "keys before the first table"}

    def walk(model: type[_Section], section: str) -> None:
        for key, field in model.model_fields.items():
            sub = _section_model(field.annotation)
            if sub is None:
                continue
            name = f"{section}.{key}" if section else key
            if sub is PairSettings:
                name = f"{section}." + "|".join(SPECIES_PAIRS)
                notes[name] = (
                    "one table per species pair; unset BB: the same as AA; unset AB: Lorentz-Berthelot "
                    "mixing of AA and BB (mean sigma, geometric-mean epsilon)"
                )
            else:
                notes[name] = (sub.__doc__ or "").strip().splitlines()[0]
            walk(sub, name)

    walk(RunConfig, "")
    return notes


def options_reference() -> str:
    """The reference of every input-file key (what ``beadmd options`` prints)."""
    lines = [
        "beadmd input-file keys (TOML). Every key has a default; reduced Lennard-Jones units",
        "(sigma = epsilon = m = k_B = 1). Each key: type = default, what is allowed, then what it does.",
    ]
    notes = _section_notes()
    section = None
    for row in option_rows():
        if row.section != section:
            section = row.section
            title = f"[{section}]" if section != "(top level)" else section
            lines += ["", f"{title}  # {notes.get(section, '')}"]
        lines.append(f"  {row.key} : {row.type} = {row.default}    allowed: {row.allowed}")
        lines.append(f"      {row.description}")
    return "\n".join(lines) + "\n"


# -- errors --------------------------------------------------------------------------------
def _short(value) -> str:
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


def _field_at(loc: tuple) -> tuple[type[_Section] | None, object]:
    """Walk the schema along ``loc``: ``(model holding the last key, its FieldInfo or None)``."""
    model: type[_Section] | None = RunConfig
    field = None
    for i, part in enumerate(loc):
        if model is None or not isinstance(part, str) or part not in model.model_fields:
            return (model if i == len(loc) - 1 else None), None
        field = model.model_fields[part]
        if i < len(loc) - 1:
            model = _section_model(field.annotation)
    return model, field


def _path(loc: tuple) -> str:
    # pydantic adds the member of a union it tried (``PairSettings``) to the location.
    parts = [str(p) for p in loc if not (isinstance(p, str) and p[:1].isupper() and p.endswith("Settings"))]
    return ".".join(parts) if parts else "(top level)"


def _clean_loc(loc: tuple) -> tuple:
    return tuple(p for p in loc if not (isinstance(p, str) and p[:1].isupper() and p.endswith("Settings")))


def _explain(error: dict) -> str:
    loc = _clean_loc(tuple(error.get("loc", ())))
    path = _path(loc)
    kind = error.get("type", "")
    if kind == "extra_forbidden":
        model, _ = _field_at(loc)
        valid = list(model.model_fields) if model is not None else []
        key = str(loc[-1]) if loc else ""
        close = difflib.get_close_matches(key, valid, n=1, cutoff=0.6)
        hint = f"; did you mean {'.'.join([*map(str, loc[:-1]), close[0]])!r}?" if close else ""
        where = ".".join(map(str, loc[:-1])) or "the top level"
        return f"unknown key {path!r}{hint} (valid keys in {where}: {', '.join(valid)})"
    if kind == "invalid_key":
        return f"key {_short(loc[-1] if loc else None)} in {path} is not allowed: keys are strings"
    model, field = _field_at(loc)
    value = error.get("input")
    if field is not None and _section_model(field.annotation) is not None:
        return f"{path} = {_short(value)} is not allowed: a table of keys ([{path}])"
    allowed = allowed_text(field) if field is not None else error.get("msg", "")
    return f"{path} = {_short(value)} is not allowed: {allowed}"


def _from_validation_error(error: ValidationError, source: str) -> ConfigError:
    problems = [_explain(e) for e in error.errors(include_url=False)]
    more = len(problems) - _MAX_ERRORS_SHOWN
    text = "; ".join(problems[:_MAX_ERRORS_SHOWN]) + (f"; and {more} more" if more > 0 else "")
    return ConfigError(f"{source}: {text}")


def _refuse(source: str, path: str, value, allowed: str) -> ConfigError:
    return ConfigError(f"{source}: {path} = {_short(value)} is not allowed: {allowed}")


# -- consistency of a well-typed configuration ---------------------------------------------
def parse_block_pattern(pattern: str) -> list[int]:
    """Species (0 for A, 1 for B) of one period of a block pattern such as ``'A16B16'``.

    Raises
    ------
    ValueError
        When the pattern is not a sequence of blocks ``A<n>`` / ``B<n>`` (``n`` >= 1,
        default 1).
    """
    out: list[int] = []
    i = 0
    if not pattern:
        raise ValueError("empty pattern")
    while i < len(pattern):
        letter = pattern[i]
        if letter not in SPECIES:
            raise ValueError(f"unexpected {letter!r}")
        j = i + 1
        while j < len(pattern) and pattern[j].isascii() and pattern[j].isdigit():
            j += 1
        count = int(pattern[i + 1 : j]) if j > i + 1 else 1
        if count < 1 or len(out) + count > MAX_BEADS:
            raise ValueError("block lengths must be >= 1")
        out.extend([SPECIES.index(letter)] * count)
        i = j
    return out


def _resolved_pairs(config: RunConfig) -> dict[str, PairSettings]:
    """Settings of every species pair, with the defaults of unset AB / BB filled in."""
    pairs = config.pairs
    aa = pairs.AA
    bb = pairs.BB if pairs.BB is not None else aa
    if pairs.AB is not None:
        ab = pairs.AB
    else:
        ab = aa.model_copy(
            update={
                "sigma": 0.5 * (aa.sigma + bb.sigma),
                "epsilon": math.sqrt(aa.epsilon * bb.epsilon),
                "attraction": 0.5 * (aa.attraction + bb.attraction),
                "cutoff": None
                if aa.cutoff is None and bb.cutoff is None
                else 0.5 * ((aa.cutoff or 2.5 * aa.sigma) + (bb.cutoff or 2.5 * bb.sigma)),
            }
        )
    return {"AA": aa, "AB": ab, "BB": bb}


def _pair_range(p: PairSettings) -> float:
    if p.form == "lennard-jones":
        return p.cutoff if p.cutoff is not None else 2.5 * p.sigma
    if p.form == "wca-cosine-tail":
        return 1.5 * p.sigma
    return _WCA_RANGE * p.sigma


def _box_edge(system: SystemSettings) -> float:
    return (system.chains * system.beads_per_chain / system.density) ** (1.0 / system.dimension)


def _lattice_spacing(system: SystemSettings) -> float:
    n, d = system.chains * system.beads_per_chain, system.dimension
    m = max(1, int(math.ceil(n ** (1.0 / d) - 1e-9)))
    while m**d < n:
        m += 1
    return _box_edge(system) / m


def _check(config: RunConfig, source: str) -> None:
    """Refuse contradictory settings of a well-typed configuration (raises ConfigError)."""
    s = config.system
    given = s.model_fields_set
    if s.chains * s.beads_per_chain > MAX_BEADS:
        raise _refuse(
            source, "system.chains", s.chains, f"chains x beads_per_chain <= {MAX_BEADS} beads in total"
        )
    try:
        period = parse_block_pattern(s.block_pattern)
    except ValueError as error:
        raise _refuse(
            source,
            "system.block_pattern",
            s.block_pattern,
            f"blocks of A and B beads such as 'A16B16' or 'A1B1' ({error})",
        ) from None
    if s.beads_per_chain % len(period):
        raise _refuse(
            source,
            "system.block_pattern",
            s.block_pattern,
            f"a pattern whose length ({len(period)} beads) divides system.beads_per_chain = "
            f"{s.beads_per_chain}",
        )
    has_b = 1 in period
    for name in ("AB", "BB"):
        if getattr(config.pairs, name) is not None and not has_b:
            raise _refuse(
                source,
                f"pairs.{name}",
                "(table)",
                f"only with B beads; system.block_pattern = {s.block_pattern!r} has none",
            )
    if s.space == "open":
        if "density" in given:
            raise _refuse(source, "system.density", s.density, "only with system.space = 'periodic'")
        if s.conformation == "lattice":
            raise _refuse(
                source,
                "system.conformation",
                s.conformation,
                "'self-avoiding' or 'random-walk' in open space",
            )
    if s.conformation == "self-avoiding":
        if not s.closest_approach < 2 * s.bond_length:
            raise _refuse(
                source,
                "system.closest_approach",
                s.closest_approach,
                f"a distance < 2 x system.bond_length = {2 * s.bond_length:g}",
            )
    b = config.bonds
    for key, kind in (("max_extension", "fene"), ("rest_length", "harmonic")):
        if key in b.model_fields_set and b.kind != kind:
            raise _refuse(source, f"bonds.{key}", getattr(b, key), f"only with bonds.kind = {kind!r}")
    pairs = _resolved_pairs(config)
    used = ("AA", "AB", "BB") if has_b else ("AA",)
    for name in used:
        p = pairs[name]
        given_here = p.model_fields_set if getattr(config.pairs, name, None) is p else set()
        if "attraction" in given_here and p.form != "wca-cosine-tail":
            raise _refuse(
                source, f"pairs.{name}.attraction", p.attraction, "only with form = 'wca-cosine-tail'"
            )
        if "cutoff" in given_here and p.form != "lennard-jones":
            raise _refuse(source, f"pairs.{name}.cutoff", p.cutoff, "only with form = 'lennard-jones'")
        if p.form == "lennard-jones" and p.cutoff is not None and p.cutoff < _WCA_RANGE * p.sigma:
            raise _refuse(
                source,
                f"pairs.{name}.cutoff",
                p.cutoff,
                f"a cutoff >= 2^(1/6) sigma = {_WCA_RANGE * p.sigma:.6g} (the potential minimum); "
                "use form = 'wca' for pure repulsion",
            )
    if has_b and config.pairs.AB is None and pairs["AA"].form != pairs["BB"].form:
        raise _refuse(
            source,
            "pairs.AB",
            "(unset)",
            f"a [pairs.AB] table when AA ({pairs['AA'].form!r}) and BB ({pairs['BB'].form!r}) differ in "
            "form (mixing needs one form)",
        )
    interacting = [pairs[n] for n in used if pairs[n].form != "none"]
    if b.kind == "fene":
        start = (
            _lattice_spacing(s) if s.conformation == "lattice" and s.space == "periodic" else s.bond_length
        )
        if b.max_extension <= start:
            raise _refuse(
                source,
                "bonds.max_extension",
                b.max_extension,
                f"a length R0 > the bond's equilibrium (starting) length {start:.3g} sigma, or the bonds "
                "start broken (Kremer-Grest: R0 = 1.5 for bonds of ~0.97)",
            )
    if s.space == "periodic":
        limit = MAX_DENSITY[s.dimension]
        if s.density > limit:
            raise _refuse(
                source,
                "system.density",
                s.density,
                f"a density <= {limit} sigma^-{s.dimension} in d = {s.dimension}; denser than that the "
                "beads cannot be placed without deep overlaps",
            )
        edge = _box_edge(s)
        reach = max((_pair_range(p) for p in interacting), default=0.0)
        if edge < 2 * reach:
            raise _refuse(
                source,
                "system.density",
                s.density,
                f"a box edge >= twice the interaction range 2 x {reach:.4g} sigma; {s.chains} x "
                f"{s.beads_per_chain} beads at this density give an edge of {edge:.4g} sigma (add chains "
                "or lower the density)",
            )
        if s.conformation == "lattice":
            spacing = _lattice_spacing(s)
            if spacing > 1.2:
                raise _refuse(
                    source,
                    "system.density",
                    s.density,
                    f"a density whose lattice spacing is <= 1.2 sigma for conformation = 'lattice'; this "
                    f"one gives {spacing:.3g} sigma (use 'self-avoiding' or 'random-walk' for dilute boxes)",
                )
    overlapping = s.conformation == "random-walk" or (s.space == "periodic" and s.conformation != "lattice")
    push = config.stages.push_off
    if overlapping and interacting and not (push.steps > 0 or (push.duration or 0) > 0):
        raise _refuse(
            source,
            "stages.push_off.steps",
            push.steps,
            f"> 0 for conformation = {s.conformation!r}"
            + (" in a periodic box" if s.space == "periodic" else "")
            + ": its beads overlap, so a push-off must remove the overlaps first (or use 'lattice')",
        )
    for name in ("push_off", "equilibration", "production"):
        stage = getattr(config.stages, name)
        if {"steps", "duration"} <= stage.model_fields_set:
            raise _refuse(
                source,
                f"stages.{name}.duration",
                stage.duration,
                f"either steps or duration, not both (stages.{name}.steps = {stage.steps} is given too)",
            )
    if config.integrator.method == "velocity-verlet" and "friction" in config.integrator.model_fields_set:
        raise _refuse(
            source, "integrator.friction", config.integrator.friction, "only with method = 'langevin-baoab'"
        )
    import numba

    limit = numba.config.NUMBA_NUM_THREADS
    if config.threads > limit:
        raise _refuse(source, "threads", config.threads, f"0 (all) or 1..{limit} (NUMBA_NUM_THREADS)")
    physical_units(config, source)  # refuses a bad [output.units]


def physical_units(config: RunConfig, source: str = "input"):
    """The :class:`~beadmd.io.h5md.PhysicalUnits` of ``[output.units]``, or None for reduced units."""
    from .h5md import PhysicalUnits

    units = config.output.units
    mapping = {}
    for key, quantity in (("sigma", "length"), ("epsilon", "energy"), ("mass", "mass"), ("tau", "time")):
        text = getattr(units, key)
        if text is None:
            continue
        allowed = allowed_text(UnitsSettings.model_fields[key])
        parts = text.split(None, 1)
        try:
            scale = float(parts[0])
        except (ValueError, IndexError):
            raise _refuse(source, f"output.units.{key}", text, allowed) from None
        if len(parts) != 2 or not (math.isfinite(scale) and scale > 0):
            raise _refuse(source, f"output.units.{key}", text, allowed + " with a finite scale > 0")
        mapping[quantity] = (scale, parts[1].strip())
    if not mapping:
        return None
    try:
        return PhysicalUnits.from_mapping(mapping)
    except ConfigError as error:
        text = str(error)
    names = (("length", "sigma"), ("energy", "epsilon"), ("mass", "mass"), ("time", "tau"))
    for quantity, key in names:
        text = text.replace(f"units[{quantity!r}]", f"output.units.{key}")
    # A bad unit string is reported as the core words it; what is missing, in our key names.
    if text.startswith("output.units.") or "length" in mapping and "time" in mapping:
        raise ConfigError(f"{source}: {text}")
    if "length" not in mapping:
        raise _refuse(
            source, "output.units.sigma", None, "set whenever [output.units] is used (what sigma is)"
        )
    if "time" not in mapping and not {"mass", "energy"} <= set(mapping):
        raise _refuse(
            source,
            "output.units.tau",
            None,
            "set, unless epsilon and mass are both given so that tau = sigma sqrt(m / epsilon) is derived",
        )
    raise ConfigError(f"{source}: {text}")


# -- entry points --------------------------------------------------------------------------
def parse_config(document: dict, source: str = "input") -> RunConfig:
    """Validate a parsed input document (a dict as :func:`tomllib.loads` returns it).

    Parameters
    ----------
    document : dict
        Sections and keys of the input file.
    source : str
        Name of the input (file name) that starts every error message.

    Returns
    -------
    RunConfig
        Frozen, fully defaulted configuration.

    Raises
    ------
    ConfigError
        Naming the key path, the value and what is allowed (unknown keys with the
        closest valid key); never another exception.
    """
    if not isinstance(document, dict):
        raise ConfigError(f"{source}: the input is {_short(document)}, not a table of sections and keys")
    try:
        config = RunConfig.model_validate(document)
        _check(config, source)
    except ValidationError as error:
        raise _from_validation_error(error, source) from None
    except ConfigError:
        raise
    except Exception as error:  # a bug must not surface as a traceback to the user
        raise ConfigError(
            f"{source}: the input could not be validated ({type(error).__name__}: {error})"
        ) from None
    return config


def load_config(path) -> RunConfig:
    """Read and validate a TOML input file.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    RunConfig

    Raises
    ------
    ConfigError
        When the file cannot be read, is not valid TOML (the message names the line) or
        does not fit the schema.
    """
    path = Path(path)
    try:
        text = path.read_bytes().decode("utf-8")
    except OSError as error:
        raise ConfigError(f"{path}: cannot read the input file ({error.strerror or error})") from None
    except UnicodeDecodeError as error:
        raise ConfigError(
            f"{path}: the input file is not UTF-8 text ({error.reason} at byte {error.start})"
        ) from None
    try:
        document = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(f"{path}: not valid TOML: {error}") from None
    return parse_config(document, source=str(path))


# -- from a configuration to the objects of the core ---------------------------------------
@dataclass(frozen=True)
class Stage:
    """A resolved run stage, all lengths in steps.

    Attributes
    ----------
    name : {"push_off", "equilibration", "production"}
    steps : int
        Length in time steps (``duration`` converted with the stage's time step).
    time_step : float
        Time step of the stage (tau).
    frame_interval, log_interval, checkpoint_interval : int
        Steps between records; 0 means none (checkpoints: only at the end).
    force_cap : float or None
        Starting force cap of the push-off; None for the other stages.
    """

    name: str
    steps: int
    time_step: float
    frame_interval: int
    log_interval: int
    checkpoint_interval: int
    force_cap: float | None = None


def run_stages(config: RunConfig) -> list[Stage]:
    """The three stages of ``config`` in run order (a stage of length 0 is kept, with steps 0)."""
    out = []
    for name in ("push_off", "equilibration", "production"):
        stage = getattr(config.stages, name)
        dt = getattr(stage, "time_step", None) or config.integrator.time_step
        if "duration" in stage.model_fields_set and stage.duration is not None:
            steps = int(math.ceil(stage.duration / dt - 1e-9))
        else:
            steps = stage.steps
        out.append(
            Stage(
                name,
                steps,
                dt,
                stage.frame_interval,
                stage.log_interval,
                stage.checkpoint_interval,
                getattr(stage, "force_cap", None),
            )
        )
    return out


def _species(config: RunConfig) -> np.ndarray:
    s = config.system
    period = parse_block_pattern(s.block_pattern)
    one_chain = np.tile(np.asarray(period, dtype=np.int64), s.beads_per_chain // len(period))
    return np.tile(one_chain, s.chains)


def build_system(config: RunConfig):
    """The starting :class:`~beadmd.system.System` of ``config`` (velocities drawn at kT).

    Conformations are grown with ``seed``; velocities are Maxwell-Boltzmann at the
    integrator's temperature, drawn with ``seed + 1``. In a periodic box, self-avoiding
    chains avoid only themselves; chains are placed at random, so a push-off is needed.
    """
    from .. import build
    from ..system import Box, System

    s = config.system
    seed = config.seed
    if s.space == "open":
        system = build.chain_ensemble(
            s.chains,
            s.beads_per_chain,
            s.dimension,
            bond_length=s.bond_length,
            self_avoiding=s.conformation == "self-avoiding",
            seed=seed,
        )
        if s.conformation == "self-avoiding" and s.closest_approach != 0.9:
            seeds = np.random.SeedSequence(seed).spawn(s.chains)
            x = np.concatenate(
                [
                    build.self_avoiding_walk(
                        s.beads_per_chain,
                        s.dimension,
                        s.bond_length,
                        s.closest_approach,
                        int(q.generate_state(1)[0]),
                    )
                    for q in seeds
                ]
            )
            system = System(x, system.box, chain=system.chain, replica=system.replica)
    elif s.conformation == "lattice":
        system = build.lattice_melt(s.chains, s.beads_per_chain, s.density, s.dimension)
    elif s.conformation == "random-walk":
        system = build.periodic_chains(
            s.chains, s.beads_per_chain, s.density, s.dimension, bond_length=s.bond_length, seed=seed
        )
    else:
        edge = _box_edge(s)
        rng = np.random.default_rng(seed)
        x = np.concatenate(
            [
                build.self_avoiding_walk(
                    s.beads_per_chain,
                    s.dimension,
                    s.bond_length,
                    s.closest_approach,
                    int(rng.integers(2**63)),
                )
                + rng.uniform(0, edge, s.dimension)
                for _ in range(s.chains)
            ]
        )
        ids = np.repeat(np.arange(s.chains), s.beads_per_chain)
        system = System(x, Box.periodic([edge] * s.dimension), chain=ids)
    system = System(
        system.positions, system.box, chain=system.chain, types=_species(config), replica=system.replica
    )
    build.maxwell_velocities(system, config.integrator.temperature, seed=(seed + 1) % 2**64)
    return system


def _pair_potential(p: PairSettings):
    from ..forces.pair import WCA, LennardJones, WCACosineTail

    if p.form == "lennard-jones":
        return LennardJones(p.sigma, p.epsilon, p.cutoff)
    if p.form == "wca-cosine-tail":
        return WCACosineTail(p.sigma, p.epsilon, p.attraction)
    if p.form == "none":
        return WCA(p.sigma, 0.0)
    return WCA(p.sigma, p.epsilon)


def build_force_field(config: RunConfig):
    """The :class:`~beadmd.forces.field.ForceField` of ``[bonds]``, ``[bending]`` and ``[pairs]``."""
    from ..forces.bonded import FENE, Bending, HarmonicBond
    from ..forces.field import ForceField

    b = config.bonds
    bonds = {
        "fene": lambda: FENE(b.stiffness, b.max_extension),
        "harmonic": lambda: HarmonicBond(b.stiffness, b.rest_length),
        "none": lambda: None,
    }[b.kind]()
    bending = Bending(config.bending.stiffness) if config.bending.stiffness > 0 else None
    pairs = _resolved_pairs(config)
    has_b = 1 in parse_block_pattern(config.system.block_pattern)
    used = SPECIES_PAIRS if has_b else ("AA",)
    if all(pairs[n].form == "none" for n in used):
        potentials = None
    elif has_b:
        potentials = {(0, 0): _pair_potential(pairs["AA"])}
        potentials[(0, 1)] = _pair_potential(pairs["AB"])
        potentials[(1, 1)] = _pair_potential(pairs["BB"])
    else:
        potentials = _pair_potential(pairs["AA"])
    return ForceField(bonds=bonds, pairs=potentials, bending=bending, exclusions=config.pairs.exclusions)


def build_integrator(config: RunConfig):
    """The integrator of ``[integrator]`` (:class:`LangevinBAOAB` or :class:`VelocityVerlet`)."""
    from ..integrate import LangevinBAOAB, VelocityVerlet

    i = config.integrator
    if i.method == "velocity-verlet":
        return VelocityVerlet(i.time_step)
    return LangevinBAOAB(i.time_step, i.friction, i.temperature)


def build_simulation(config: RunConfig):
    """The :class:`~beadmd.simulate.Simulation` and the stages that ``config`` describes.

    The simulation holds the production force field and integrator; the push-off stage
    (force cap, own time step) is for the caller to carry out before equilibration.

    Parameters
    ----------
    config : RunConfig

    Returns
    -------
    simulation : Simulation
        At step 0, forces evaluated at the starting conformation.
    stages : list of Stage
        Push-off, equilibration and production, lengths in steps.

    Raises
    ------
    ConfigError
        When the core refuses the combination (the message says which).
    """
    from ..errors import BeadmdError
    from ..simulate import Simulation

    try:
        system = build_system(config)
        field = build_force_field(config)
        integrator = build_integrator(config)
        simulation = Simulation(
            system,
            field,
            integrator,
            seed=config.seed,
            skin=config.neighbour_list.skin,
            threads=config.threads or None,
            neighbour_search=config.neighbour_list.search,
        )
    except ConfigError as error:
        raise ConfigError(f"setting up the run: {error}") from None
    except BeadmdError:
        raise
    return simulation, run_stages(config)


__all__ = [
    "OptionRow",
    "RunConfig",
    "Stage",
    "build_force_field",
    "build_integrator",
    "build_simulation",
    "build_system",
    "load_config",
    "option_rows",
    "options_reference",
    "parse_block_pattern",
    "parse_config",
    "physical_units",
    "run_stages",
]
