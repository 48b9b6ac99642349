"""One brick as a plain-array problem: the named layout of its unknowns and the arrays the
solver kernels read (:mod:`aftertreat.kernel_numpy`, :mod:`aftertreat.kernel_numba`).

A :class:`BrickProblem` is compiled once from a :class:`~aftertreat.brick.Brick` (grid,
washcoat nodes, every rate law of its catalyst layers encoded as arrays, thermodynamic tables,
pore data) and re-used for any inlet: :meth:`BrickProblem.bind` adds what depends on the
inlet stream (molar flows, gas-property table, film transfer numbers, residual scales). Both
parts are NamedTuples of numpy arrays and numbers (:class:`KernelStatic`, :class:`KernelFlow`),
which the numba kernel takes as they are; nothing in them is a Python object.

The unknowns of one cell (finite volume along the brick), in this order (:class:`StateLayout`)::

    F[0..nsp-1]        molar flow of every species at the cell outlet        [mol/s]
    T_gas, T_solid     gas temperature at the cell outlet, solid temperature [K]
    per washcoat node n (gas side first), a block of nb = nf + ns unknowns:
      c[n, 0..nf-1]    concentration of each *film species* in the layer     [mol/m^3]
      theta[n, 0..ns-1] NH3 coverage of each storage site                     [-]

Film species are those that enter some rate (:attr:`aftertreat.kinetics.Mechanism.film_species`
of every layer); the other species react with nothing and only ride along. Code outside the
model asks the layout for a component by name (``layout.index("theta", node=3, site="S1")``)
or uses its views (``layout.coverage(x)``), never an offset of its own. The equations are in
``docs/model.md`` and in the docstring of :mod:`aftertreat.reactor`.

Rate laws as arrays. Every form of :data:`aftertreat.kinetics.FORMS` is one case of the general
law (per reaction q, concentrations c of the film species, coverages theta, temperature T)::

    r_q = k_q(T) a_q  E_q(theta, T)  C_q(theta)  ER_q(theta)  [P_a(c) - exp(-ln Kc_q(T)) P_b(c)] / D_q^p_q
    k_q(T) = k_ref exp(-E/R (1/T - 1/T_ref))        a_q = activity if the reaction ages, else 1
    P_a = prod_i c_i^a_qi,   P_b = prod_i c_i^b_qi  (b and Kc only for reversible rates)
    C_q = prod_s theta_s^m_qs (1 - theta_s)^q_qs
    E_q = exp(alpha E/(R T) theta_s)                (Temkin desorption; else 1)
    ER_q = theta* (1 - exp(-theta_s/theta*))        (Eley-Rideal with critical coverage; else 1)
    D_q = 1 + sum_i K_i(T) max(c_i, 0)              (Langmuir-Hinshelwood; else p_q = 0)

Whole orders take c as it is, fractional ones max(c, 0) (the solver keeps c >= 0 anyway).
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from typing import NamedTuple

import numpy as np

from . import thermo, transport
from .brick import Brick
from .gas import GasProperties
from .kinetics import (EleyRidealCritical, LangmuirHinshelwood, MassAction, PowerLaw,
                       Reversible, TemkinDesorption)
from .species import MOLAR_MASS, SPECIES
from .stream import Stream
from .units import R_GAS

__all__ = ["StateLayout", "BrickProblem", "BoundProblem", "KernelStatic", "KernelFlow",
           "node_shares", "NODE_SPREAD"]

NSP = len(SPECIES)

#: Ratio of the deepest to the shallowest node of a resolved layer: nodes grow geometrically
#: from the layer's gas side inward, where fast reactions have their steep profiles. With 32
#: nodes (the default) this reproduces the slab effectiveness factor tanh(phi)/phi within
#: 0.2 % up to phi = 20 (24 nodes: 0.35 %; measured, ``tests/validation/test_grid.py``).
#: Clustering at both faces of a layer was tried and is worse on the demo cases.
NODE_SPREAD = 50.0


def node_shares(n: int, spread: float = NODE_SPREAD) -> np.ndarray:
    """Fractions of a layer's thickness per node, growing geometrically inward (sum 1)."""
    q = spread ** (1.0 / (n - 1)) if n > 1 else 1.0
    w = q ** np.arange(n, dtype=float)
    return w / w.sum()


# ---------------------------------------------------------------------------------------------
# the layout of the unknowns
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class StateLayout:
    """Names and positions of the unknowns of one cell (see the module docstring).

    A state of a whole brick is an array ``x`` of shape ``(n_cells, nv)``; the views below
    return arrays shaped by meaning (cells x nodes x species ...), and :meth:`index` gives the
    column of one named component.
    """
    n_nodes: int
    film_species: tuple[str, ...]
    sites: tuple[str, ...]                 # site names, padded layers use the first ones
    node_layer: tuple[int, ...]
    node_depth: tuple[float, ...] = ()     # depth of each node's centre, fraction of its layer

    @property
    def nf(self) -> int:
        return len(self.film_species)

    @property
    def ns(self) -> int:
        return len(self.sites)

    @property
    def nb(self) -> int:
        """Unknowns per washcoat node."""
        return self.nf + self.ns

    @property
    def nv(self) -> int:
        """Unknowns per cell."""
        return NSP + 2 + self.n_nodes * self.nb

    #: column of the gas temperature and of the solid temperature
    T_GAS = NSP
    T_SOLID = NSP + 1
    NODE0 = NSP + 2
    #: the gas unknowns (flows and T_gas) are the first GAS columns
    GAS = NSP + 1

    def index(self, kind: str, *, species: str | None = None, node: int = 0,
              site: str | None = None) -> int:
        """Column of a component: ``"F"`` (with ``species``), ``"T_gas"``, ``"T_solid"``,
        ``"c"`` (``node``, ``species``) or ``"theta"`` (``node``, ``site``)."""
        if kind == "F":
            return SPECIES.index(species)
        if kind == "T_gas":
            return self.T_GAS
        if kind == "T_solid":
            return self.T_SOLID
        base = self.NODE0 + node * self.nb
        if not 0 <= node < self.n_nodes:
            raise IndexError(f"node {node} out of range 0..{self.n_nodes - 1}")
        if kind == "c":
            return base + self.film_species.index(species)
        if kind == "theta":
            return base + self.nf + self.sites.index(site)
        raise KeyError(f"unknown component kind {kind!r}")

    def component_names(self) -> list[str]:
        """A name for every column, e.g. ``F[NO]``, ``T_gas``, ``c[2,NH3]``, ``theta[0,S1]``."""
        out = [f"F[{s}]" for s in SPECIES] + ["T_gas", "T_solid"]
        for n in range(self.n_nodes):
            out += [f"c[{n},{s}]" for s in self.film_species]
            out += [f"theta[{n},{s}]" for s in self.sites]
        return out

    # -- views ---------------------------------------------------------------------------------
    def flows(self, x: np.ndarray) -> np.ndarray:
        """Molar flows at every cell outlet [n, nsp] (a view)."""
        return x[..., :NSP]

    def T_gas(self, x: np.ndarray) -> np.ndarray:
        return x[..., self.T_GAS]

    def T_solid(self, x: np.ndarray) -> np.ndarray:
        return x[..., self.T_SOLID]

    def _nodes(self, x: np.ndarray) -> np.ndarray:
        return x[..., self.NODE0:].reshape(x.shape[:-1] + (self.n_nodes, self.nb))

    def c_surface(self, x: np.ndarray) -> np.ndarray:
        """Layer concentrations of the film species [..., n_nodes, nf] (a view)."""
        return self._nodes(x)[..., :self.nf]

    def coverage(self, x: np.ndarray) -> np.ndarray:
        """NH3 coverages [..., n_nodes, ns] (a view)."""
        return self._nodes(x)[..., self.nf:]

    def differential(self) -> np.ndarray:
        """Mask of the columns that carry a time derivative in a transient (coverages, solid
        temperature): the ones a time-step error estimate looks at."""
        m = np.zeros(self.nv, dtype=bool)
        m[self.T_SOLID] = True
        for n in range(self.n_nodes):
            b = self.NODE0 + n * self.nb + self.nf
            m[b:b + self.ns] = True
        return m


# ---------------------------------------------------------------------------------------------
# kernel data
# ---------------------------------------------------------------------------------------------
class KernelStatic(NamedTuple):
    """What the kernels read of a brick, independent of its inlet (SI units throughout)."""
    # sizes and switches
    n: int                       # cells
    nnode: int
    nf: int
    ns: int
    nrxn: int
    resolved: int                # 1: finite volumes across the layers; 0: one node per layer
    effectiveness: int           # 1: eta = tanh(phi)/phi on keyed rates
    film: int                    # 0: film resistance off (kinetic limit)
    d_h: float                   # hydraulic diameter [m]
    gsa: float                   # geometric surface area [m^2/m^3 of brick]
    activity: float
    T_amb: float
    film_idx: np.ndarray         # [nf] species index of each film species
    # cells
    dz: np.ndarray               # [n] [m]
    vol: np.ndarray              # [n] brick volume of the cell [m^3]
    A_ht: np.ndarray             # [n] geometric (film) area of the cell [m^2]
    loss_UA: np.ndarray          # [n] can heat-loss conductance [W/K]
    C_cell: np.ndarray           # [n] heat capacity of the cell [J/K]
    # washcoat nodes
    node_layer: np.ndarray       # [nnode] int
    node_dx: np.ndarray          # [nnode] thickness [m]
    node_frac: np.ndarray        # [nnode] volume fraction of the brick
    cap: np.ndarray              # [nnode, ns] capacity [mol/m^3 of layer] (1 where unused)
    site_used: np.ndarray        # [nnode, ns] 1.0 where the layer has that site
    # layers
    depth: np.ndarray            # [nlayer] slab thickness f_k / a [m]
    rxn_lo: np.ndarray           # [nlayer] first reaction of the layer (global index)
    rxn_hi: np.ndarray           # [nlayer] one past its last reaction
    eps_tau: np.ndarray          # [nlayer] porosity / tortuosity
    d_pore: np.ndarray           # [nlayer] pore diameter [m]
    # reactions (all layers, concatenated)
    k_ref: np.ndarray            # [R]
    E_R: np.ndarray              # [R] E / R [K]
    inv_Tref: np.ndarray         # [R]
    ages: np.ndarray             # [R] 1.0 if the activity multiplies it
    a_ord: np.ndarray            # [R, nf] exponents of P_a
    a_frac: np.ndarray           # [R, nf] 1.0 where the exponent is fractional (clip c at 0)
    b_ord: np.ndarray            # [R, nf] exponents of P_b
    b_frac: np.ndarray           # [R, nf]
    rev: np.ndarray              # [R] row of the ln Kc table, or -1
    cov_m: np.ndarray            # [R, ns]
    cov_q: np.ndarray            # [R, ns]
    temkin_site: np.ndarray      # [R] int, -1 if none
    temkin_aE_R: np.ndarray      # [R] alpha E / R [K]
    er_site: np.ndarray          # [R] int, -1 if none
    er_ts: np.ndarray            # [R] theta*
    inh_p: np.ndarray            # [R] exponent of the inhibition denominator (0: none)
    inh_K: np.ndarray            # [R, nf] K_ref [m^3/mol]
    inh_dH_R: np.ndarray         # [R, nf] dH / R [K]
    inh_invT: np.ndarray         # [R, nf] 1/T_ref [1/K]
    key: np.ndarray              # [R] film index of the diffusion key species, -1 if none
    key_nu: np.ndarray           # [R] |nu_equiv| of the key species
    nu_equiv: np.ndarray         # [R, nsp] stored NH3 counted as NH3 (balances N, H, O)
    nu_gas: np.ndarray           # [R, nsp] gas species as written
    nu_film: np.ndarray          # [R, nf] gas stoichiometry of the film species
    nu_site: np.ndarray          # [R, ns]
    # thermodynamic tables on a 1 K grid from T_tab0 (:class:`aftertreat.thermo.ReactionTable`)
    T_tab0: float
    dH_tab: np.ndarray           # [ngrid, R] reaction enthalpies [J per reaction]
    TlnKc_tab: np.ndarray        # [ngrid, nrev] T ln Kc
    nasa_low: np.ndarray         # [nsp, 7]
    nasa_high: np.ndarray        # [nsp, 7]
    nasa_Tmid: np.ndarray        # [nsp]
    molar_mass: np.ndarray       # [nsp] [kg/mol]


class KernelFlow(NamedTuple):
    """What the kernels read of the inlet: flows, gas-property table, transfer numbers, scales."""
    F_in: np.ndarray             # [nsp] [mol/s]
    T_in: float                  # [K]
    p: float                     # [Pa] (the model uses the inlet pressure throughout)
    F_scale: float               # inlet total flow [mol/s]
    F_row: np.ndarray            # [nsp] scale of each flow row: max(inlet flow, 1 ppm of it)
    x_cp: np.ndarray             # [nsp] composition of the cp and property tables
    lnT_tab: np.ndarray          # [ntab] ln T of the property table
    lnprop: np.ndarray           # [ntab, 2 + nsp] ln(mu, k, D_1..D_nsp) at p_tab
    p_ratio: float               # p_tab / p (diffusivities scale as 1/p)
    Sh: np.ndarray               # [n, nf] cell-mean Sherwood numbers
    Nu: np.ndarray               # [n] cell-mean Nusselt numbers
    node_scale: np.ndarray       # [nnode, nf] scale of each layer balance [mol/(m^2 s)]
    T_scale: np.ndarray          # [n] scale of the solid energy rows [W/K]


# ---------------------------------------------------------------------------------------------
# compiling a brick
# ---------------------------------------------------------------------------------------------
@lru_cache(maxsize=1)
def _nasa():
    low, high, t_mid = thermo.nasa7_coefficients()
    return np.ascontiguousarray(low), np.ascontiguousarray(high), np.ascontiguousarray(t_mid)


def _encode_reaction(rx, film: list[int], ns: int):
    """One reaction as the rows of the general law (module docstring)."""
    nf = len(film)
    law = rx.law
    a = np.zeros(nf)
    b = np.zeros(nf)
    cov_m = np.zeros(ns)
    cov_q = np.zeros(ns)
    inh_K = np.zeros(nf)
    inh_dH = np.zeros(nf)
    inh_iT = np.zeros(nf)
    out = dict(temkin_site=-1, temkin_aE_R=0.0, er_site=-1, er_ts=1.0, inh_p=0.0, rev=None)
    pos = {sp: k for k, sp in enumerate(film)}
    for i, n in law.orders.items():
        a[pos[i]] += n
    for s, m in law.coverage.items():
        cov_m[s] += m
    for s, q in law.free_sites.items():
        cov_q[s] += q
    kind = type(law)
    if kind is TemkinDesorption:
        out["temkin_site"] = law.site
        out["temkin_aE_R"] = law.alpha * law.E / R_GAS
        cov_m[law.site] += 1.0
    elif kind is EleyRidealCritical:
        out["er_site"] = law.site
        out["er_ts"] = law.theta_star
    elif kind is Reversible:
        for i in np.nonzero(law.nu)[0]:
            if law.nu[i] < 0:
                a[pos[i]] += -law.nu[i]
            else:
                b[pos[i]] += law.nu[i]
        out["rev"] = law.nu
    elif kind is LangmuirHinshelwood:
        for i, (K_ref, dH, T_ref) in law.inhibition.items():
            inh_K[pos[i]] = K_ref
            inh_dH[pos[i]] = dH / R_GAS
            inh_iT[pos[i]] = 1.0 / T_ref
        out["inh_p"] = law.inhibition_order if law.inhibition else 0.0
        if law.log_kc is not None:
            for i in set(law.orders) | set(np.nonzero(law.nu)[0]):
                e = law.orders.get(i, 0.0) + law.nu[i]
                if e != 0.0:
                    b[pos[i]] += e
            out["rev"] = law.nu
    elif kind not in (MassAction, PowerLaw):
        raise TypeError(f"no array encoding for rate law {kind.__name__}")
    frac = lambda e: (e != np.round(e)).astype(float)       # noqa: E731
    out.update(a=a, b=b, a_frac=frac(a), b_frac=frac(b), cov_m=cov_m, cov_q=cov_q,
               inh_K=inh_K, inh_dH_R=inh_dH, inh_invT=inh_iT)
    return out


def _kinetics(catalysts, film: list[int], ns: int) -> dict:
    """The reaction arrays of every layer, concatenated (layer k owns rxn_lo[k]:rxn_hi[k])."""
    rows, lo, hi, rev_nu = [], [], [], []
    for cat in catalysts:
        lo.append(len(rows))
        for rx in cat.mechanism.reactions:
            enc = _encode_reaction(rx, film, ns)
            enc["rx"] = rx
            rows.append(enc)
        hi.append(len(rows))
    R = len(rows)
    nf = len(film)
    pos = {sp: k for k, sp in enumerate(film)}
    d = {k: np.zeros(R) for k in ("k_ref", "E_R", "inv_Tref", "ages", "temkin_aE_R", "er_ts",
                                  "inh_p", "key_nu")}
    for k in ("temkin_site", "er_site", "rev", "key"):
        d[k] = np.full(R, -1, dtype=np.int64)
    for k in ("a_ord", "a_frac", "b_ord", "b_frac", "inh_K", "inh_dH_R", "inh_invT", "nu_film"):
        d[k] = np.zeros((R, nf))
    d["cov_m"] = np.zeros((R, ns))
    d["cov_q"] = np.zeros((R, ns))
    d["nu_site"] = np.zeros((R, ns))
    d["nu_equiv"] = np.zeros((R, NSP))
    d["nu_gas"] = np.zeros((R, NSP))
    for q, enc in enumerate(rows):
        rx = enc["rx"]
        law = rx.law
        d["k_ref"][q] = law.k_ref
        d["E_R"][q] = law.E / R_GAS
        d["inv_Tref"][q] = 1.0 / law.T_ref
        d["ages"][q] = 1.0 if rx.ages else 0.0
        d["temkin_site"][q] = enc["temkin_site"]
        d["temkin_aE_R"][q] = enc["temkin_aE_R"]
        d["er_site"][q] = enc["er_site"]
        d["er_ts"][q] = enc["er_ts"]
        d["inh_p"][q] = enc["inh_p"]
        d["a_ord"][q], d["a_frac"][q] = enc["a"], enc["a_frac"]
        d["b_ord"][q], d["b_frac"][q] = enc["b"], enc["b_frac"]
        d["cov_m"][q], d["cov_q"][q] = enc["cov_m"], enc["cov_q"]
        d["inh_K"][q], d["inh_dH_R"][q], d["inh_invT"][q] = (enc["inh_K"], enc["inh_dH_R"],
                                                           enc["inh_invT"])
        if enc["rev"] is not None:
            d["rev"][q] = len(rev_nu)
            rev_nu.append(enc["rev"])
        if rx.diffusion_key is not None:
            d["key"][q] = pos[rx.diffusion_key]
            d["key_nu"][q] = abs(rx.nu_equiv[rx.diffusion_key])
        d["nu_equiv"][q] = rx.nu_equiv
        d["nu_gas"][q] = rx.nu_gas
        d["nu_film"][q] = rx.nu_gas[film]
        d["nu_site"][q, :len(rx.nu_site)] = rx.nu_site
    nu_all = d["nu_equiv"].T if R else np.zeros((NSP, 0))
    table = thermo.ReactionTable(nu_all)
    d["T_tab0"] = float(table.T0)
    d["dH_tab"] = np.ascontiguousarray(table._dH)
    if rev_nu:
        d["TlnKc_tab"] = np.ascontiguousarray(
            thermo.ReactionTable(np.array(rev_nu).T)._TlnKc)
    else:
        d["TlnKc_tab"] = np.zeros((table._dH.shape[0], 1))
    d["rxn_lo"] = np.array(lo, dtype=np.int64)
    d["rxn_hi"] = np.array(hi, dtype=np.int64)
    return d


#: compiled kinetics per tuple of catalyst objects (catalysts are loaded once and shared)
_KINETICS_CACHE: dict[tuple, tuple] = {}


def _kinetics_for(catalysts, film, ns):
    key = tuple(id(c) for c in catalysts) + (tuple(film), ns)
    hit = _KINETICS_CACHE.get(key)
    if hit is None or any(a is not b for a, b in zip(hit[0], catalysts)):
        if len(_KINETICS_CACHE) > 256:
            _KINETICS_CACHE.clear()
        hit = (tuple(catalysts), _kinetics(catalysts, film, ns))
        _KINETICS_CACHE[key] = hit
    return hit[1]


class BrickProblem:
    """A brick compiled into kernel arrays (immutable once built); :meth:`bind` feeds it an
    inlet stream.

    Attributes: ``brick``, ``layout`` (:class:`StateLayout`), ``static``
    (:class:`KernelStatic`), ``z_edges`` [m], ``nv``.
    """

    def __init__(self, brick: Brick):
        self.brick = brick
        sub = brick.substrate
        mechs = [c.mechanism for c in brick.catalysts]
        film = sorted(set().union(*[m.film_species for m in mechs]))
        ns = max([len(m.sites) for m in mechs] + [0])
        site_names = []
        for m in mechs:
            for s in m.sites:
                if len(site_names) < ns and s not in site_names:
                    site_names.append(s)
        site_names += [f"site{k + 1}" for k in range(len(site_names), ns)]
        resolved = brick.washcoat == "resolved"
        fracs = sub.layer_volume_fractions
        depths = np.array([f / sub.gsa for f in fracs])
        node_layer, node_dx, node_frac, node_depth = [], [], [], []
        for k, (depth, frac) in enumerate(zip(depths, fracs)):
            nn = int(brick.nodes_per_layer) if resolved else 1
            share = node_shares(nn)
            node_layer += [k] * nn
            node_dx += list(depth * share)
            node_frac += list(frac * share)
            node_depth += list(np.cumsum(share) - 0.5 * share)
        nnode = len(node_layer)
        self.layout = StateLayout(n_nodes=nnode, film_species=tuple(SPECIES[i] for i in film),
                                  sites=tuple(site_names), node_layer=tuple(node_layer),
                                  node_depth=tuple(float(d) for d in node_depth))
        z = np.asarray(brick.cell_edges(), dtype=float)
        self.z_edges = z
        dz = np.diff(z)
        A = brick.frontal_area
        cap = np.ones((nnode, ns))
        used = np.zeros((nnode, ns))
        for j, k in enumerate(node_layer):
            m = mechs[k]
            cap[j, :len(m.sites)] = m.capacity
            used[j, :len(m.sites)] = 1.0
        kin = _kinetics_for(brick.catalysts, film, ns)
        low, high, t_mid = _nasa()
        pores = [c.pores for c in brick.catalysts]
        self.static = KernelStatic(
            n=len(dz), nnode=nnode, nf=len(film), ns=ns, nrxn=len(kin["k_ref"]),
            resolved=int(resolved), effectiveness=int(brick.washcoat == "effectiveness"),
            film=int(bool(brick.film)), d_h=float(sub.d_h), gsa=float(sub.gsa),
            activity=float(brick.activity), T_amb=float(brick.T_ambient),
            film_idx=np.array(film, dtype=np.int64),
            dz=dz, vol=A * dz, A_ht=sub.gsa * A * dz,
            loss_UA=brick.heat_loss_W_m2K * np.pi * brick.diameter * dz,
            C_cell=brick.heat_capacity_J_m3K * A * dz,
            node_layer=np.array(node_layer, dtype=np.int64), node_dx=np.array(node_dx),
            node_frac=np.array(node_frac), cap=cap, site_used=used, depth=depths,
            rxn_lo=kin["rxn_lo"], rxn_hi=kin["rxn_hi"],
            eps_tau=np.array([p.porosity / p.tortuosity for p in pores]),
            d_pore=np.array([p.pore_diameter for p in pores]),
            k_ref=kin["k_ref"], E_R=kin["E_R"], inv_Tref=kin["inv_Tref"], ages=kin["ages"],
            a_ord=kin["a_ord"], a_frac=kin["a_frac"], b_ord=kin["b_ord"], b_frac=kin["b_frac"],
            rev=kin["rev"], cov_m=kin["cov_m"], cov_q=kin["cov_q"],
            temkin_site=kin["temkin_site"], temkin_aE_R=kin["temkin_aE_R"],
            er_site=kin["er_site"], er_ts=kin["er_ts"], inh_p=kin["inh_p"],
            inh_K=kin["inh_K"], inh_dH_R=kin["inh_dH_R"], inh_invT=kin["inh_invT"],
            key=kin["key"], key_nu=kin["key_nu"], nu_equiv=kin["nu_equiv"],
            nu_gas=kin["nu_gas"], nu_film=kin["nu_film"], nu_site=kin["nu_site"],
            T_tab0=kin["T_tab0"], dH_tab=kin["dH_tab"], TlnKc_tab=kin["TlnKc_tab"],
            nasa_low=low, nasa_high=high, nasa_Tmid=t_mid, molar_mass=MOLAR_MASS.copy())
        self.nv = self.layout.nv

    def bind(self, inlet: Stream, like: "BoundProblem | None" = None) -> "BoundProblem":
        """This brick fed by ``inlet`` (:class:`BoundProblem`). ``like``, the same brick bound
        to an earlier inlet, lends its film transfer numbers when the mass flow moved by less
        than 1 % and the temperature by less than 2 K (the entrance-region Sherwood number then
        changes by < 0.5 %, as Sh ~ Gz^(1/3) at most): transient steps re-bind every step."""
        gas = GasProperties.for_stream(inlet.F)
        if (like is not None and like.problem is self and like.gas is gas
                and abs(inlet.mass_flow / like.transfer_at[0] - 1.0) <= 0.01
                and abs(inlet.T - like.transfer_at[1]) <= 2.0 and inlet.p == like.transfer_at[2]):
            transfer, at, notes = like.transfer, like.transfer_at, like.notes
        else:
            transfer, notes = self._transfer_numbers(inlet, gas)
            at = (inlet.mass_flow, inlet.T, inlet.p)
        Sh, Nu, node_scale, T_scale = transfer
        flow = KernelFlow(
            F_in=np.ascontiguousarray(inlet.F, dtype=float), T_in=float(inlet.T),
            p=float(inlet.p), F_scale=float(inlet.total),
            F_row=np.maximum(inlet.F, 1e-6 * inlet.total), x_cp=gas.x,
            lnT_tab=gas._lnT, lnprop=gas._lnprop, p_ratio=gas.p / inlet.p,
            Sh=Sh, Nu=Nu, node_scale=node_scale, T_scale=T_scale)
        return BoundProblem(problem=self, inlet=inlet, gas=gas, flow=flow, transfer=transfer,
                            transfer_at=at, notes=notes)

    def _transfer_numbers(self, inlet: Stream, gas: GasProperties):
        """Cell-mean Sherwood and Nusselt numbers at the inlet state (Graetz coordinate) and the
        residual scales (film or layer conductance x inlet concentration; h A of each cell)."""
        b, st = self.brick, self.static
        sub = b.substrate
        T, p = inlet.T, inlet.p
        rho = float(gas.density(T, p))
        u = inlet.mass_flow / (rho * b.frontal_area * sub.ofa)       # channel velocity [m/s]
        D = gas.diffusivity(T, p)[st.film_idx]                        # [nf]
        k_gas = float(gas.conductivity(T))
        alpha = k_gas / (rho * float(gas.cp_mass(T)))
        method = b.sherwood
        notes = []
        if sub.shape != "square" and method == "tronconi_forzatti_1992":
            method = "hawthorn_1974"
            notes.append("Tronconi-Forzatti holds for square channels; Hawthorn (1974) used "
                         "for this slit geometry")
        z = self.z_edges
        # Sherwood (film species) and Nusselt (heat) in one evaluation of the correlation
        both = transport.sherwood_cell_mean(
            method, z[:, None] * np.append(D, alpha)[None, :] / (u * st.d_h ** 2),
            shape=sub.shape)
        Sh, Nu = both[:, :-1], both[:, -1]
        ctot = p / (R_GAS * T)
        km = Sh[0] * D / st.d_h if st.film else np.full(st.nf, 1e12)
        scale = np.empty((st.nnode, st.nf))
        if st.resolved:
            D_mol = gas.diffusivity(T, p)
            De = np.array([c.pores.effective_diffusivity(D_mol, T)[st.film_idx]
                           for c in b.catalysts])                       # [layers, nf]
            half = st.node_dx[:, None] / (2.0 * De[st.node_layer])
            scale[0] = 1.0 / (1.0 / km + half[0])
            if st.nnode > 1:
                scale[1:] = 1.0 / (half[:-1] + half[1:])
        else:
            scale[:] = km
        # each species' balance relative to its own inlet concentration (at least 1 ppm), so a
        # converged trace species is accurate relative to itself
        c_in = inlet.F[st.film_idx] / inlet.total * ctot
        scale *= np.maximum(c_in, 1e-6 * ctot)
        T_scale = Nu * k_gas / st.d_h * st.A_ht
        return (np.ascontiguousarray(Sh), np.ascontiguousarray(Nu), scale,
                np.ascontiguousarray(T_scale)), notes

    def stored_nh3_per_cell(self, x: np.ndarray) -> np.ndarray:
        """NH3 held on the storage sites of each cell [mol]: sum of Omega theta V_node."""
        st = self.static
        if not st.ns:
            return np.zeros(st.n)
        th = self.layout.coverage(x)                                   # [n, nnode, ns]
        w = (st.cap * st.site_used)[None] * (st.vol[:, None] * st.node_frac[None, :])[..., None]
        return np.sum(th * w, axis=(1, 2))

    def stored_nh3_mol(self, x: np.ndarray) -> float:
        """NH3 held on the storage sites [mol]."""
        return float(self.stored_nh3_per_cell(x).sum())

    def capacity_mol(self) -> float:
        """NH3 held when every site is full [mol]."""
        st = self.static
        return float(np.sum(st.cap * st.site_used * st.node_frac[:, None]) * st.vol.sum())


@dataclass(eq=False)
class BoundProblem:
    """A :class:`BrickProblem` fed by one inlet: what the kernels read (``problem.static``,
    ``flow``), with the inlet stream and its gas-property table."""
    problem: BrickProblem
    inlet: Stream
    gas: GasProperties
    flow: KernelFlow
    transfer: tuple
    transfer_at: tuple
    notes: list

    @property
    def static(self) -> KernelStatic:
        return self.problem.static

    @property
    def layout(self) -> StateLayout:
        return self.problem.layout

    # -- states --------------------------------------------------------------------------------
    def inlet_state(self) -> np.ndarray:
        """Every cell at the inlet state, with empty storage sites: the raw start of a cold
        solve (the solver balances the coverages itself)."""
        lay, inl = self.layout, self.inlet
        x = np.zeros((self.static.n, lay.nv))
        lay.flows(x)[:] = inl.F
        x[:, lay.T_GAS] = inl.T
        x[:, lay.T_SOLID] = inl.T
        c = inl.x * inl.p / (R_GAS * inl.T)
        lay.c_surface(x)[:] = c[self.static.film_idx]
        return x

    def pressure_drop(self, x: np.ndarray) -> transport.PressureDrop:
        """Pressure drop along the brick at the state ``x`` (its gas temperatures) and the
        bound inlet (:func:`aftertreat.transport.pressure_drop`)."""
        b, gas, inl = self.problem.brick, self.gas, self.inlet
        Tg = self.layout.T_gas(x)
        return transport.pressure_drop(self.static.d_h, b.substrate.ofa, b.substrate.shape,
                                       b.length, inl.mass_flow, b.frontal_area,
                                       gas.density(Tg, inl.p), gas.viscosity(Tg),
                                       apparent=b.apparent_friction,
                                       z_edges=self.problem.z_edges)


def signature(brick: Brick) -> tuple:
    """What defines a compiled problem (the same catalyst objects, geometry and grid)."""
    return (tuple(id(c) for c in brick.catalysts), brick.substrate, brick.length, brick.diameter,
            brick.activity, brick.washcoat, brick.nodes_per_layer, brick.cells, brick.film,
            brick.heat_loss_W_m2K, brick.T_ambient, brick.heat_capacity_kJ_m3K, brick.sherwood,
            brick.apparent_friction, brick.grid)


def problem_for(brick: Brick) -> BrickProblem:
    """The compiled problem of ``brick``, built once per brick and kept on it (rebuilt if a
    field of the brick was changed since)."""
    sig = signature(brick)
    held = brick.__dict__.get("_compiled")
    if held is not None and held[0] == sig:
        return held[1]
    prob = BrickProblem(brick)
    brick.__dict__["_compiled"] = (sig, prob)
    return prob
