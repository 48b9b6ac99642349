"""Catalyst parameter sets: one TOML file each, with its sources and per-parameter provenance.

A catalyst file holds a description, its ``[[source]]`` citations, the temperature range over which
its parameters hold, the pore structure of the catalytic layer (for the effective diffusivity), the
NH3 storage sites and the reactions (see :mod:`aftertreat.kinetics` for the rate-law forms).
Every numeric parameter carries a provenance string that starts with ``transcribed``,
``from memory`` or ``fitted``; the loader refuses a file where one is missing, and results show
them (:meth:`Catalyst.provenance_table`).

The files shipped with the project live in ``catalysts/`` (installed as ``aftertreat.catalysts``).
"""
from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from pathlib import Path

import numpy as np

from .errors import InputError, did_you_mean
from .kinetics import Mechanism, build_reaction
from .species import MOLAR_MASS
from .units import R_GAS, to_si, ZERO_C_K

__all__ = ["Catalyst", "LayeredCatalyst", "PoreStructure", "load_catalyst", "load_layers",
           "available_catalysts", "PROVENANCE_KINDS"]

#: How a parameter was obtained; every provenance string starts with one of these.
PROVENANCE_KINDS = ("transcribed", "from memory", "fitted")
_TOP_KEYS = {"name", "description", "role", "valid_T_C", "source", "pores", "site", "reaction",
             "notes", "fit"}


@dataclass(frozen=True)
class PoreStructure:
    """Pore structure of a catalytic layer, for its effective diffusivity.

    D_eff,i = (porosity / tortuosity) * (1/D_m,i + 1/D_K,i)^-1   (Bosanquet; random-pore slab)
    D_K,i   = (d_pore / 3) * sqrt(8 R T / (pi M_i))               (Knudsen, kinetic theory)

    References
    ----------
    Hill & Root, *Introduction to Chemical Engineering Kinetics and Reactor Design*, 2nd ed.
    (Wiley 2014), ch. 12 (effective diffusivity; from memory). Froment, Bischoff & De Wilde,
    *Chemical Reactor Analysis and Design*, 3rd ed. (Wiley 2011), ch. 3.
    """
    porosity: float
    tortuosity: float
    pore_diameter: float        # [m]

    def effective_diffusivity(self, D_mol, T):
        """D_eff [m^2/s] from the molecular diffusivities ``D_mol`` [..., nsp] at ``T`` [...] K."""
        T = np.asarray(T, dtype=float)[..., None]
        D_K = self.pore_diameter / 3.0 * np.sqrt(8.0 * R_GAS * T / (np.pi * MOLAR_MASS))
        return self.porosity / self.tortuosity / (1.0 / D_mol + 1.0 / D_K)


@dataclass
class Catalyst:
    """A catalyst parameter set loaded from a file."""
    key: str
    name: str
    description: str
    role: str                      # "SCR" or "oxidation"
    valid_T: tuple[float, float]   # [K]
    sources: list[dict]
    pores: PoreStructure
    mechanism: Mechanism
    file: str
    site_provenance: dict[str, dict[str, str]] = field(default_factory=dict)
    notes: str = ""
    fit: dict = field(default_factory=dict)      # the [fit] table of a calibrated file

    def check_temperature(self, T: float, what: str = "temperature") -> None:
        """Raise :class:`InputError` if ``T`` [K] lies outside the file's validity range."""
        lo, hi = self.valid_T
        if not (lo - 1e-9 <= T <= hi + 1e-9):
            raise InputError(f"{what} {T - ZERO_C_K:.1f} degC is outside the validity range "
                             f"{lo - ZERO_C_K:.0f}..{hi - ZERO_C_K:.0f} degC of catalyst '{self.key}'",
                             key="valid_T_C", value=round(T - ZERO_C_K, 1), file=self.file)

    def provenance_table(self) -> list[dict]:
        """Rows (item, parameter, provenance, source) for every parameter, for reports."""
        rows = []
        for site, prov in self.site_provenance.items():
            for p, text in prov.items():
                rows.append({"catalyst": self.key, "item": f"site {site}", "parameter": p,
                             "provenance": text, "source": ""})
        for r in self.mechanism.reactions:
            for p, text in r.provenance.items():
                rows.append({"catalyst": self.key, "item": r.name, "parameter": p,
                             "provenance": text, "source": r.source})
        return rows

    def citations(self) -> list[str]:
        """One line per source: authors (year) title, journal, doi."""
        out = []
        for s in self.sources:
            doi = f", doi:{s['doi']}" if s.get("doi") else ""
            title = f" {s['title']}." if s.get("title") else ""
            out.append(f"{s.get('authors', '?')} ({s.get('year', '?')}).{title} "
                       f"{s.get('journal', '')}{doi}")
        return out


def _fit_table(fit, file: str) -> dict:
    """The ``[fit]`` table a calibration wrote (aftertreat.fit): parameter labels, fitted
    coordinates, their covariance and 95 % intervals; checked for shape, else empty."""
    if fit is None:
        return {}
    try:
        labels = list(fit["parameters"])
        n = len(labels)
        mean = np.asarray(fit["mean"], dtype=float)
        cov = np.asarray(fit["covariance"], dtype=float)
        ok = mean.shape == (n,) and cov.shape == (n, n) and len(fit["coordinates"]) == n \
            and len(fit["ci95_low"]) == n and len(fit["ci95_high"]) == n
    except (KeyError, TypeError, ValueError):
        ok = False
    if not ok:
        raise InputError("expected parameters, coordinates, mean, covariance (n x n), ci95_low "
                         "and ci95_high of equal length (as aftertreat fit writes them)",
                         key="fit", file=file)
    return dict(fit)


def _check_provenance(prov: dict, needed: list[str], file: str, where: str) -> None:
    for p in needed:
        text = prov.get(p)
        if not isinstance(text, str) or not text.strip().lower().startswith(PROVENANCE_KINDS):
            raise InputError("every parameter needs a provenance starting with one of "
                             f"{PROVENANCE_KINDS}", key=f"{where}.provenance.{p}", value=text,
                             file=file)


_PARAM_KEYS = ("k_ref", "A", "E_kJ_mol", "E", "alpha", "theta_star", "orders", "coverage",
               "free_sites", "inhibition", "inhibition_order")


def parse_catalyst(data: dict, *, key: str, file: str) -> Catalyst:
    """Validate a parsed catalyst table into a :class:`Catalyst` (errors name file and key)."""
    for k in data:
        if k not in _TOP_KEYS:
            raise InputError("unknown key; valid: " + ", ".join(sorted(_TOP_KEYS))
                             + did_you_mean(k, _TOP_KEYS), key=k, file=file)
    sources = list(data.get("source", []))
    if not sources:
        raise InputError("a catalyst file needs at least one [[source]] citation", key="source",
                         file=file)
    role = data.get("role", "SCR")
    if role not in ("SCR", "oxidation"):
        raise InputError("expected role 'SCR' or 'oxidation'", key="role", value=role, file=file)
    vt = data.get("valid_T_C")
    if not (isinstance(vt, list) and len(vt) == 2 and vt[0] < vt[1]):
        raise InputError("expected [low, high] in degC", key="valid_T_C", value=vt, file=file)
    pores_spec = dict(data.get("pores", {}))
    try:
        pores = PoreStructure(
            porosity=float(pores_spec["porosity"]), tortuosity=float(pores_spec["tortuosity"]),
            pore_diameter=to_si(pores_spec.get("pore_diameter_nm", 0.0), "nm", key="pores",
                                file=file) * 1e-9)
    except KeyError as exc:
        raise InputError("expected porosity, tortuosity and pore_diameter_nm",
                         key=f"pores.{exc.args[0]}", file=file) from None
    if not (0 < pores.porosity < 1 and pores.tortuosity >= 1 and pores.pore_diameter > 0):
        raise InputError("expected 0 < porosity < 1, tortuosity >= 1, pore_diameter_nm > 0",
                         key="pores", value=pores_spec, file=file)
    _check_provenance(dict(pores_spec.get("provenance", {})),
                      ["porosity", "tortuosity", "pore_diameter_nm"], file, "pores")

    sites, caps, site_prov = [], [], {}
    for i, s in enumerate(data.get("site", [])):
        name = s.get("name", f"S{i + 1}")
        cap = to_si(s.get("capacity_mol_m3", -1), "mol/m**3", key=f"site[{i}].capacity_mol_m3",
                    file=file)
        if not cap > 0:
            raise InputError("expected a storage capacity > 0 mol/m3 of catalytic layer",
                             key=f"site[{i}].capacity_mol_m3", value=cap, file=file)
        sites.append(name)
        caps.append(cap)
        prov = dict(s.get("provenance", {}))
        _check_provenance(prov, ["capacity_mol_m3"], file, f"site[{i}]")
        site_prov[name] = prov

    reactions = []
    for i, spec in enumerate(data.get("reaction", [])):
        where = f"reaction[{i}]"
        rx = build_reaction(spec, sites, file=file, where=where)
        _check_provenance(dict(spec.get("provenance", {})),
                          [p for p in _PARAM_KEYS if p in spec], file, where)
        reactions.append(rx)
    if not reactions:
        raise InputError("a catalyst needs at least one [[reaction]]", key="reaction", file=file)
    mech = Mechanism(reactions=reactions, sites=sites, capacity=np.array(caps))
    return Catalyst(key=key, name=str(data.get("name", key)),
                    description=str(data.get("description", "")), role=role,
                    valid_T=(vt[0] + ZERO_C_K, vt[1] + ZERO_C_K), sources=sources, pores=pores,
                    mechanism=mech, file=file, site_provenance=site_prov,
                    notes=str(data.get("notes", "")), fit=_fit_table(data.get("fit"), file))


@dataclass
class LayeredCatalyst:
    """A coated product made of several catalyst layers (gas side first), e.g. a dual-layer ASC.

    Each layer is a plain catalyst file plus a default thickness [m]; a case may override the
    thicknesses.
    """
    key: str
    name: str
    description: str
    role: str
    sources: list[dict]
    layers: list[tuple[Catalyst, float]]
    file: str

    def citations(self) -> list[str]:
        return Catalyst.citations(self)  # same fields


_LAYERED_KEYS = {"name", "description", "role", "source", "layer"}


def parse_layered(data: dict, *, key: str, file: str) -> LayeredCatalyst:
    """Validate a layered-catalyst table (``[[layer]]`` entries naming plain catalyst files)."""
    for k in data:
        if k not in _LAYERED_KEYS:
            raise InputError("unknown key; valid: " + ", ".join(sorted(_LAYERED_KEYS))
                             + did_you_mean(k, _LAYERED_KEYS), key=k, file=file)
    layers = []
    for i, spec in enumerate(data["layer"]):
        ck = spec.get("catalyst")
        if not isinstance(ck, str):
            raise InputError("expected the key of a catalyst file", key=f"layer[{i}].catalyst",
                             value=ck, file=file)
        cat = load_catalyst(ck, base=Path(file).parent)
        if isinstance(cat, LayeredCatalyst):
            raise InputError("a layer must be a plain catalyst, not a layered one",
                             key=f"layer[{i}].catalyst", value=ck, file=file)
        th = to_si(spec.get("thickness_um", -1.0), "um", key=f"layer[{i}].thickness_um", file=file)
        if not th > 0:
            raise InputError("expected a layer thickness > 0 um", key=f"layer[{i}].thickness_um",
                             value=spec.get("thickness_um"), file=file)
        layers.append((cat, th * 1e-6))
    if len(layers) < 2:
        raise InputError("a layered catalyst needs at least two [[layer]] entries", key="layer",
                         file=file)
    return LayeredCatalyst(key=key, name=str(data.get("name", key)),
                           description=str(data.get("description", "")),
                           role=str(data.get("role", "ASC")), sources=list(data.get("source", [])),
                           layers=layers, file=file)


def _library_dir() -> Path:
    return Path(str(resources.files("aftertreat.catalysts")))


def available_catalysts() -> list[str]:
    """Keys (file stems) of the catalyst files shipped with the project."""
    return sorted(p.stem for p in _library_dir().glob("*.toml"))


@lru_cache(maxsize=64)
def _load_path(path: str, key: str) -> "Catalyst | LayeredCatalyst":
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", file=path) from None
    if "layer" in data:
        return parse_layered(data, key=key, file=path)
    return parse_catalyst(data, key=key, file=path)


def load_catalyst(name: str | Path, base: Path | None = None) -> "Catalyst | LayeredCatalyst":
    """Load a catalyst by key (e.g. ``"vanadia_extruded"``) or a file by path.

    A key is looked up beside ``base`` (the folder of the file that names it) first, then in the
    shipped library. A file with ``[[layer]]`` entries gives a :class:`LayeredCatalyst`.
    """
    p = Path(name)
    if p.suffix == ".toml" or p.exists():
        if not p.is_absolute() and base is not None and (base / p).exists():
            p = base / p
        if not p.exists():
            raise InputError("catalyst file not found", value=str(name), file=str(p))
        return _load_path(str(p.resolve()), p.stem)
    if base is not None and (Path(base) / f"{name}.toml").exists():
        return _load_path(str((Path(base) / f"{name}.toml").resolve()), str(name))
    lib = _library_dir() / f"{name}.toml"
    if not lib.exists():
        keys = available_catalysts()
        raise InputError(f"unknown catalyst; shipped: {', '.join(keys)}" + did_you_mean(name, keys),
                         key="catalyst", value=str(name))
    return _load_path(str(lib), str(name))


def load_layers(name: "str | Path | Catalyst | LayeredCatalyst") -> list[tuple[Catalyst, float | None]]:
    """The layers of a catalyst, gas side first, with default thicknesses [m] (None for a plain
    catalyst, whose thickness comes from the substrate)."""
    cat = load_catalyst(name) if isinstance(name, (str, Path)) else name
    if isinstance(cat, LayeredCatalyst):
        return list(cat.layers)
    return [(cat, None)]
