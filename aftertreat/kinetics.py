"""Global rate laws for SCR, NH3 storage and oxidation catalysts, and their compiled mechanism.

A catalyst file picks, per reaction, one of the published rate-law *forms* below by name; the
parameters come from the file. Rates are in mol per m^3 of catalytic layer (washcoat or catalytic
wall) per second; concentrations c in mol/m^3 of gas; stored NH3 as the coverage theta (0..1) of a
storage site. Every form is evaluated vectorised over any leading shape (cells x nodes).

Rate constants are written ``k = k_ref * exp(-E/R * (1/T - 1/T_ref))`` (better conditioned than a bare
pre-exponential); a file may give ``A`` and ``E`` instead, and ``k_ref = A exp(-E/(R T_ref))``.

Forms (``FORMS``):

``power_law``
    r = k(T) * prod_i c_i^n_i                                   (user kinetics, analytical checks)
``mass_action``
    r = k(T) * prod_i c_i^n_i * prod_s theta_s^m_s * (1 - theta_s)^q_s
    Olsson, Sjovall & Blint, Appl. Catal. B 81 (2008) 203 (the global template).
``temkin_desorption``
    r = k(T, theta) * theta,  k = A exp(-E0 (1 - alpha theta) / (R T))
    Temkin coverage dependence of the desorption energy: Nova, Lietti, Tronconi & Forzatti,
    Catal. Today 60 (2000) 73; Olsson et al. 2008.
``eley_rideal_critical_coverage``
    r = k(T) * prod_i c_i^n_i * theta* (1 - exp(-theta/theta*))
    Eley-Rideal standard SCR on vanadia with a critical NH3 coverage (rate linear in theta at low
    coverage, independent of it above theta*): Nova et al. 2000; form from memory (see catalyst file).
``reversible``
    r = k(T) * (prod_reactants c^nu - prod_products c^nu / Kc(T))
    Kc from NASA-7 thermodynamic data (:mod:`aftertreat.thermo`); orders are the stoichiometric
    coefficients, so the rate vanishes at equilibrium exactly.
``langmuir_hinshelwood``
    r = k(T) * prod_i c_i^n_i / (1 + sum_i K_i(T) c_i)^p ,  K_i = K_ref,i exp(-dH_i/R (1/T - 1/T_ref))
    optional ``reversible = true`` multiplies by (1 - Q/Kc). Inhibition denominators for oxidation
    catalysts (e.g. Colombo et al., Appl. Catal. B 142-143 (2013); Mulla et al., J. Catal. 241
    (2006) 389).
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from .errors import InputError, did_you_mean
from .species import ELEMENT_MATRIX, INDEX, SPECIES
from .units import R_GAS, to_si, ZERO_C_K

__all__ = ["FORMS", "Reaction", "Mechanism", "parse_equation", "arrhenius"]

_TERM = re.compile(r"^\s*(\d+(?:\.\d*)?|\.\d+)?\s*([A-Za-z][A-Za-z0-9]*)(?:\(([A-Za-z0-9_]+)\))?\s*$")


def parse_equation(text: str, sites: list[str]):
    """Read ``"4 NH3(S1) + 4 NO + O2 -> 4 N2 + 6 H2O"`` into stoichiometric vectors.

    Returns ``(nu_gas, nu_site, reversible_arrow)`` where ``nu_gas`` [nsp] holds the gas species
    (negative for reactants) and ``nu_site`` [nsite] the NH3 stored on each site. ``<->`` or ``<=>``
    marks a reversible reaction. Stored species are NH3 only, written ``NH3(site)``.
    """
    arrow = None
    for a in ("<->", "<=>", "->", "=>"):
        if a in text:
            arrow = a
            break
    if arrow is None:
        raise ValueError(f"no arrow ('->' or '<->') in equation {text!r}")
    lhs, rhs = text.split(arrow, 1)
    nu_gas = np.zeros(len(SPECIES))
    nu_site = np.zeros(len(sites))
    for side, sign in ((lhs, -1.0), (rhs, 1.0)):
        for term in side.split("+"):
            m = _TERM.match(term)
            if not m:
                raise ValueError(f"cannot read term {term.strip()!r} in equation {text!r}")
            coef = float(m.group(1)) if m.group(1) else 1.0
            name, site = m.group(2), m.group(3)
            if site is not None:
                if name != "NH3":
                    raise ValueError(f"only NH3 is stored on sites; got {name}({site})")
                if site not in sites:
                    raise ValueError(f"unknown site {site!r} in {text!r}; sites: {sites}"
                                     + did_you_mean(site, sites))
                nu_site[sites.index(site)] += sign * coef
            else:
                if name not in INDEX:
                    raise ValueError(f"unknown species {name!r} in {text!r}; valid: "
                                     f"{', '.join(SPECIES)}" + did_you_mean(name, SPECIES))
                nu_gas[INDEX[name]] += sign * coef
    return nu_gas, nu_site, arrow in ("<->", "<=>")


def arrhenius(k_ref, E, T_ref, T):
    """k(T) = k_ref exp(-E/R (1/T - 1/T_ref)); E [J/mol], temperatures [K]."""
    return k_ref * np.exp(-E / R_GAS * (1.0 / T - 1.0 / T_ref))


def _pos(c):
    return np.maximum(c, 0.0)


def _power(c, n):
    """c**n for a rate law. Whole orders take c as it is, so rates stay smooth through c = 0
    (Newton iterates may dip slightly below zero; a clipped rate has a kink there that makes
    Newton cycle). Fractional orders need c >= 0 and clip."""
    if n == 1.0:
        return c
    if float(n).is_integer():
        return c ** int(n)
    return _pos(c) ** n


# --------------------------------------------------------------------------------------------
# rate-law forms
# --------------------------------------------------------------------------------------------
@dataclass
class _Form:
    """Base of the compiled rate-law forms: parameters already in SI."""
    k_ref: float
    E: float
    T_ref: float
    orders: dict[int, float] = field(default_factory=dict)     # species index -> order
    coverage: dict[int, float] = field(default_factory=dict)   # site index -> exponent on theta
    free_sites: dict[int, float] = field(default_factory=dict)  # site index -> exponent on 1-theta

    def k(self, T):
        return arrhenius(self.k_ref, self.E, self.T_ref, T)

    def _conc_part(self, c):
        out = 1.0
        for i, n in self.orders.items():
            out = out * _power(c[..., i], n)
        return out

    def _cov_part(self, theta):
        out = 1.0
        for s, m in self.coverage.items():
            th = np.clip(theta[..., s], 0.0, 1.0)
            out = out * (th if m == 1.0 else th ** m)
        for s, q in self.free_sites.items():
            fr = np.clip(1.0 - theta[..., s], 0.0, 1.0)
            out = out * (fr if q == 1.0 else fr ** q)
        return out


class PowerLaw(_Form):
    def __call__(self, c, theta, T, k=None):
        return (self.k(T) if k is None else k) * self._conc_part(c)


class MassAction(_Form):
    def __call__(self, c, theta, T, k=None):
        return (self.k(T) if k is None else k) * self._conc_part(c) * self._cov_part(theta)


@dataclass
class TemkinDesorption(_Form):
    """r = A exp(-E0 (1 - alpha theta)/(R T)) theta, with A = k_ref exp(E0/(R T_ref)):
    k_ref is the desorption rate constant at T_ref on a bare surface (theta -> 0)."""
    alpha: float = 0.0
    site: int = 0

    def __call__(self, c, theta, T, k=None):
        th = np.clip(theta[..., self.site], 0.0, 1.0)
        return (self.k(T) if k is None else k) * np.exp(self.alpha * self.E * th / (R_GAS * T)) * th


@dataclass
class EleyRidealCritical(_Form):
    theta_star: float = 1.0
    site: int = 0

    def __call__(self, c, theta, T, k=None):
        th = np.clip(theta[..., self.site], 0.0, 1.0)
        ts = self.theta_star
        return (self.k(T) if k is None else k) * self._conc_part(c) * ts * (1.0 - np.exp(-th / ts))


@dataclass
class Reversible(_Form):
    nu: np.ndarray | None = None
    log_kc: object = None            # callable T -> ln Kc in mol/m3 units

    def __call__(self, c, theta, T, k=None):
        fwd = 1.0
        rev = 1.0
        for i in np.nonzero(self.nu)[0]:
            n = self.nu[i]
            if n < 0:
                fwd = fwd * _power(c[..., i], -n)
            else:
                rev = rev * _power(c[..., i], n)
        return (self.k(T) if k is None else k) * (fwd - rev * np.exp(-self.log_kc(T))) * self._cov_part(theta)


@dataclass
class LangmuirHinshelwood(_Form):
    inhibition: dict[int, tuple[float, float, float]] = field(default_factory=dict)
    inhibition_order: float = 1.0
    nu: np.ndarray | None = None
    log_kc: object = None

    def __call__(self, c, theta, T, k=None):
        den = 1.0
        for i, (K_ref, dH, T_ref) in self.inhibition.items():
            den = den + K_ref * np.exp(-dH / R_GAS * (1.0 / T - 1.0 / T_ref)) * _pos(c[..., i])
        fwd = self._conc_part(c)
        if self.log_kc is not None:
            # k prod c^n (1 - Q/Kc) written without dividing by concentrations:
            # prod c^n - prod c^(n + nu) / Kc  (exponents n + nu >= 0, checked at load)
            back = 1.0
            for i in set(self.orders) | set(np.nonzero(self.nu)[0]):
                e = self.orders.get(i, 0.0) + self.nu[i]
                if e != 0.0:
                    back = back * _power(c[..., i], e)
            fwd = fwd - back * np.exp(-self.log_kc(T))
        return (self.k(T) if k is None else k) * fwd * self._cov_part(theta) / den ** self.inhibition_order


#: Rate-law forms by name, with the parameter keys each accepts beyond the Arrhenius ones.
FORMS: dict[str, tuple[type, set[str]]] = {
    "power_law": (PowerLaw, {"orders"}),
    "mass_action": (MassAction, {"orders", "coverage", "free_sites"}),
    "temkin_desorption": (TemkinDesorption, {"alpha", "site"}),
    "eley_rideal_critical_coverage": (EleyRidealCritical, {"orders", "theta_star", "site"}),
    "reversible": (Reversible, {"coverage"}),
    "langmuir_hinshelwood": (LangmuirHinshelwood,
                             {"orders", "coverage", "free_sites", "inhibition",
                              "inhibition_order", "reversible"}),
}
_ARRHENIUS_KEYS = {"k_ref", "A", "E_kJ_mol", "E", "T_ref_C", "T_ref"}


@dataclass
class Reaction:
    """One global reaction of a catalyst, compiled.

    ``nu_gas`` holds the gas species as written; ``nu_site`` the NH3 stored on each site;
    ``nu_equiv`` counts stored NH3 as gas NH3, so every row conserves N, H and O exactly (checked
    at load) and the gas molar flows along a brick balance by construction at steady state.
    """
    name: str
    equation: str
    form: str
    law: _Form
    nu_gas: np.ndarray
    nu_site: np.ndarray
    nu_equiv: np.ndarray
    diffusion_key: int | None = None
    ages: bool = True
    source: str = ""
    provenance: dict[str, str] = field(default_factory=dict)


def _num(spec, key, unit, file, where, default=None):
    if key in spec:
        return to_si(spec[key], unit, key=f"{where}.{key}", file=file)
    return default


def build_reaction(spec: dict, sites: list[str], *, file: str | None = None,
                   where: str = "reaction") -> Reaction:
    """Compile one ``[[reaction]]`` table of a catalyst file; errors name the file and key."""
    from . import thermo

    spec = dict(spec)
    name = spec.get("name", where)
    common = {"name", "equation", "form", "diffusion_key", "ages", "source", "provenance"}
    form = spec.get("form")
    if form not in FORMS:
        raise InputError(f"expected a rate-law form, one of {', '.join(FORMS)}"
                         + did_you_mean(form, FORMS), key=f"{where}.form", value=form, file=file)
    cls, extra = FORMS[form]
    allowed = common | _ARRHENIUS_KEYS | extra
    for key in spec:
        if key not in allowed:
            raise InputError(f"unknown key for form '{form}'; allowed: {', '.join(sorted(allowed))}"
                             + did_you_mean(key, allowed), key=f"{where}.{key}", file=file)
    try:
        nu_gas, nu_site, rev_arrow = parse_equation(str(spec.get("equation", "")), sites)
    except ValueError as exc:
        raise InputError(str(exc), key=f"{where}.equation", value=spec.get("equation"),
                         file=file) from None
    nu_equiv = nu_gas.copy()
    nu_equiv[INDEX["NH3"]] += nu_site.sum()
    imbalance = ELEMENT_MATRIX @ nu_equiv
    if np.max(np.abs(imbalance)) > 1e-12:
        bad = {e: float(v) for e, v in zip(("N", "H", "O", "C", "Ar"), imbalance) if abs(v) > 1e-12}
        raise InputError(f"reaction does not balance in elements (net atoms {bad})",
                         key=f"{where}.equation", value=spec.get("equation"), file=file)

    T_ref = _num(spec, "T_ref_C", "degC", file, where)
    T_ref = T_ref + ZERO_C_K if T_ref is not None else _num(spec, "T_ref", "K", file, where, 573.15)
    E = _num(spec, "E_kJ_mol", "kJ/mol", file, where)
    E = E * 1e3 if E is not None else _num(spec, "E", "J/mol", file, where, 0.0)
    if "k_ref" in spec and "A" in spec:
        raise InputError("give either k_ref (with T_ref) or A, not both", key=f"{where}.A",
                         file=file)
    if "k_ref" in spec:
        k_ref = float(spec["k_ref"])
    elif "A" in spec:
        k_ref = float(spec["A"]) * np.exp(-E / (R_GAS * T_ref))
    else:
        raise InputError("expected a rate constant k_ref (with T_ref_C) or A", key=f"{where}.k_ref",
                         file=file)
    if not (np.isfinite(k_ref) and k_ref >= 0):
        raise InputError("expected a finite rate constant >= 0", key=f"{where}.k_ref",
                         value=spec.get("k_ref", spec.get("A")), file=file)

    def species_map(table, key):
        out = {}
        for sp, n in dict(table).items():
            if sp not in INDEX:
                raise InputError(f"unknown species; valid: {', '.join(SPECIES)}"
                                 + did_you_mean(sp, SPECIES), key=f"{where}.{key}.{sp}", file=file)
            out[INDEX[sp]] = float(n)
        return out

    def site_map(table, key):
        out = {}
        for s, n in dict(table).items():
            if s not in sites:
                raise InputError(f"unknown site; sites: {', '.join(sites)}" + did_you_mean(s, sites),
                                 key=f"{where}.{key}.{s}", file=file)
            out[sites.index(s)] = float(n)
        return out

    def one_site(key):
        s = spec.get("site", sites[0] if len(sites) == 1 else None)
        if s not in sites:
            raise InputError(f"expected a storage site, one of {sites}", key=f"{where}.site",
                             value=s, file=file)
        return sites.index(s)

    kw = dict(k_ref=k_ref, E=E, T_ref=T_ref)
    if "orders" in extra:
        kw["orders"] = species_map(spec.get("orders", {}), "orders")
    if "coverage" in extra:
        kw["coverage"] = site_map(spec.get("coverage", {}), "coverage")
    if "free_sites" in extra:
        kw["free_sites"] = site_map(spec.get("free_sites", {}), "free_sites")
    if form == "temkin_desorption":
        kw["alpha"] = float(spec.get("alpha", 0.0))
        kw["site"] = one_site("site")
    if form == "eley_rideal_critical_coverage":
        ts = float(spec.get("theta_star", 1.0))
        if not 0 < ts <= 1:
            raise InputError("expected 0 < theta_star <= 1", key=f"{where}.theta_star", value=ts,
                             file=file)
        kw["theta_star"] = ts
        kw["site"] = one_site("site")
    wants_rev = form == "reversible" or bool(spec.get("reversible", False))
    if wants_rev:
        if nu_site.any():
            raise InputError("a reversible reaction may not involve stored NH3",
                             key=f"{where}.equation", value=spec.get("equation"), file=file)
        nu = nu_gas.copy()
        kw["nu"] = nu
        table = thermo.ReactionTable(nu)
        kw["log_kc"] = lambda T, table=table: table.log_kc(T)[..., 0]
    if form == "langmuir_hinshelwood" and wants_rev:
        for i in np.nonzero(nu_gas)[0]:
            if kw["orders"].get(i, 0.0) + nu_gas[i] < 0:
                raise InputError(f"a reversible rate needs the order of {SPECIES[i]} to be at "
                                 f"least its stoichiometric coefficient {-nu_gas[i]:g}",
                                 key=f"{where}.orders", value=spec.get("orders"), file=file)
    if form == "langmuir_hinshelwood":
        inh = {}
        for sp, p in dict(spec.get("inhibition", {})).items():
            if sp not in INDEX:
                raise InputError("unknown species" + did_you_mean(sp, SPECIES),
                                 key=f"{where}.inhibition.{sp}", file=file)
            p = dict(p)
            K_ref = float(p.get("K_ref", 0.0))
            dH = float(p.get("dH_kJ_mol", 0.0)) * 1e3
            Tr = float(p.get("T_ref_C", T_ref - ZERO_C_K)) + ZERO_C_K
            inh[INDEX[sp]] = (K_ref, dH, Tr)
        kw["inhibition"] = inh
        kw["inhibition_order"] = float(spec.get("inhibition_order", 1.0))
    law = cls(**kw)

    key = spec.get("diffusion_key")
    if key is not None and key not in INDEX:
        raise InputError("unknown species" + did_you_mean(key, SPECIES),
                         key=f"{where}.diffusion_key", value=key, file=file)
    prov = dict(spec.get("provenance", {}))
    return Reaction(name=name, equation=str(spec["equation"]), form=form, law=law, nu_gas=nu_gas,
                    nu_site=nu_site, nu_equiv=nu_equiv,
                    diffusion_key=INDEX[key] if key is not None else None,
                    ages=bool(spec.get("ages", not (nu_site.any() and not nu_equiv.any()))),
                    source=str(spec.get("source", "")), provenance=prov)


@dataclass
class Mechanism:
    """The compiled reactions and storage sites of one catalyst layer.

    Arrays: ``nu_gas``, ``nu_equiv`` [nrxn, nsp]; ``nu_site`` [nrxn, nsite]. ``film_species`` are
    the species whose concentration enters some rate, so they need a surface (washcoat)
    concentration; the others are taken at their bulk-gas value.
    """
    reactions: list[Reaction]
    sites: list[str]
    capacity: np.ndarray            # [nsite] mol per m^3 of catalytic layer

    def __post_init__(self):
        self._thermo = None
        self.nu_gas = np.array([r.nu_gas for r in self.reactions]).reshape(-1, len(SPECIES))
        self.nu_equiv = np.array([r.nu_equiv for r in self.reactions]).reshape(-1, len(SPECIES))
        self.nu_site = np.array([r.nu_site for r in self.reactions]).reshape(
            len(self.reactions), len(self.sites))
        self.ages = np.array([r.ages for r in self.reactions], dtype=bool)
        self._k_ref = np.array([r.law.k_ref for r in self.reactions])
        self._E_R = np.array([r.law.E / R_GAS for r in self.reactions])
        self._inv_T_ref = np.array([1.0 / r.law.T_ref for r in self.reactions])
        # mass-action and power-law reactions are evaluated together (one product per species
        # and per site instead of one per reaction); the others one by one
        group = [j for j, r in enumerate(self.reactions)
                 if type(r.law) in (MassAction, PowerLaw)]
        self._group = np.array(group, dtype=int)
        self._others = [j for j in range(len(self.reactions)) if j not in group]
        ns = len(self.sites)
        O = np.zeros((len(group), len(SPECIES)))
        Mc = np.zeros((len(group), ns))
        Qf = np.zeros((len(group), ns))
        for g, j in enumerate(group):
            law = self.reactions[j].law
            for i, n in law.orders.items():
                O[g, i] = n
            if isinstance(law, MassAction):
                for st, m in law.coverage.items():
                    Mc[g, st] = m
                for st, q in law.free_sites.items():
                    Qf[g, st] = q
        self._orders = [(i, O[:, i], O[:, i] != np.round(O[:, i]))
                        for i in range(len(SPECIES)) if np.any(O[:, i] != 0)]
        self._cov = [(st, Mc[:, st], Qf[:, st]) for st in range(ns)
                     if np.any(Mc[:, st] != 0) or np.any(Qf[:, st] != 0)]
        deps = set()
        for r in self.reactions:
            law = r.law
            deps |= {i for i, n in law.orders.items() if n != 0}
            if getattr(law, "nu", None) is not None:
                deps |= set(np.nonzero(law.nu)[0])
            deps |= set(getattr(law, "inhibition", {}) or {})
            if r.diffusion_key is not None:
                deps.add(r.diffusion_key)
        self.film_species = sorted(deps)

    @property
    def n_reactions(self) -> int:
        return len(self.reactions)

    def rates(self, c, theta, T, activity: float = 1.0):
        """Rates of every reaction [mol/(m^3 s)], shape ``T.shape + (nrxn,)``.

        ``c`` [..., nsp] concentrations in mol/m^3, ``theta`` [..., nsite], ``T`` [...] in K.
        ``activity`` (ageing) multiplies the catalytic reactions; NH3 adsorption and desorption
        keep their rates (``ages = false`` in the file).
        """
        T = np.asarray(T, dtype=float)
        shape = np.broadcast_shapes(T.shape, np.shape(c)[:-1])
        out = np.empty(shape + (len(self.reactions),))
        # every rate constant in one exponential (Arrhenius, as in :func:`arrhenius`)
        k = self._k_ref * np.exp(-self._E_R * (1.0 / T[..., None] - self._inv_T_ref))
        if len(self._group):
            # the same products as _Form._conc_part and _cov_part: whole orders take c as it is,
            # fractional ones clip at 0; coverages clipped to [0, 1]
            g = k[..., self._group]
            for i, e, frac in self._orders:
                base = c[..., i][..., None]
                if frac.any():
                    base = np.where(frac, np.maximum(base, 0.0), base)
                g = g * base ** e
            for st, m, q in self._cov:
                th = np.clip(theta[..., st], 0.0, 1.0)[..., None]
                g = g * th ** m * (1.0 - th) ** q
            out[..., self._group] = g
        for j in self._others:
            out[..., j] = self.reactions[j].law(c, theta, T, k[..., j])
        if activity != 1.0:
            out[..., self.ages] *= activity
        return out

    def reaction_enthalpy(self, T):
        """Reaction enthalpies [J per reaction as written], shape ``T.shape + (nrxn,)``.

        From NASA-7 data (tabulated, :class:`aftertreat.thermo.ReactionTable`) with stored NH3
        counted as gas NH3 (adsorption heats net to zero at steady state).
        """
        if self._thermo is None:
            from . import thermo
            self._thermo = thermo.ReactionTable(self.nu_equiv.T)
        return self._thermo.enthalpy(T)
