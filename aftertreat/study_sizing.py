"""Sizing to a confidence level: the smallest buildable train whose probability of compliance
under the case's uncertainties reaches a given level (``aftertreat size --confidence P``).

The deterministic sizing (:func:`aftertreat.sizing.size_case`: the case's aged activities and
its design margin) gives the starting train. Each candidate train is then run over the same
samples of the case's ``[[study.uncertain]]`` and ``[[study.correlated]]`` inputs (the same
seed and sample indices for every candidate: common random numbers, so that the difference
between two candidates is the design's, not the draw's, and the search moves smoothly), and
its probability of compliance is p = k / n with the Wilson 95 % interval
(:mod:`aftertreat.study_summary`). The limits are checked as they are: the uncertainty takes
the place of the design margin.

Search (greedy over whole build steps, :mod:`aftertreat.build`): from the deterministic
train, while p < P grow one section (SCR or slip catalyst) by a stride of build steps (each
step on its shortest brick), choosing the section whose stride raises p the most (the smaller
volume on a tie), the stride doubling (1, 2, 4 ... 16 steps) while p stays below P; once
p >= P, try a stride down on each section (each step on its longest brick) and take the
smallest train that still has p >= P, halving the stride when none does, until one step down
keeps none. At most :data:`MAX_CANDIDATES` trains are evaluated. The criterion is the estimate p >= P; the interval is
shown beside it (a design that must hold P with 95 % confidence needs the lower end >= P:
raise ``[study] samples``).
"""
from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np

from .errors import InputError
from .study_summary import Compliance

__all__ = ["Candidate", "ConfidenceSizing", "size_to_confidence"]

#: most candidate trains the search evaluates
MAX_CANDIDATES = 40


@dataclass(frozen=True)
class Candidate:
    """One train evaluated: brick lengths [m], volume [m^3], compliance over the samples."""
    lengths_m: tuple[float, ...]
    volume_m3: float
    compliance: Compliance
    refused_or_not_converged: int = 0

    def to_dict(self, names) -> dict:
        return {"lengths_mm": {n: L * 1e3 for n, L in zip(names, self.lengths_m)},
                "volume_L": self.volume_m3 * 1e3, **self.compliance.to_dict(),
                "samples_failing_to_solve": self.refused_or_not_converged}


@dataclass
class ConfidenceSizing:
    """The answer of :func:`size_to_confidence`."""
    level: float
    samples: int
    seed: int
    feasible: bool
    brick_names: list[str]
    best: Candidate | None
    deterministic: Candidate
    candidates: list[Candidate] = field(default_factory=list)
    note: str = ""
    seconds: float = 0.0
    where: str = ""

    def to_json(self) -> dict:
        n = self.brick_names
        return {"level": self.level, "criterion": "estimated probability >= level",
                "interval": "Wilson score, 95 %", "samples": self.samples, "seed": self.seed,
                "common_random_numbers": True, "feasible": self.feasible,
                "design": None if self.best is None else self.best.to_dict(n),
                "deterministic_design": self.deterministic.to_dict(n),
                "candidates": [c.to_dict(n) for c in self.candidates], "note": self.note,
                "solve_s": self.seconds, "ran_on": self.where}


class _Pool:
    """Chunks of samples on Dask (local cluster or ``scheduler``) or in this process
    (``workers=0``), kept open over the whole search so the workers stay warm."""

    def __init__(self, workers, scheduler):
        self.workers, self.scheduler = workers, scheduler
        self.client = self.cluster = None

    def __enter__(self):
        from .study import _local_cluster, default_workers
        if self.workers == 0 and self.scheduler is None:
            self.where = "this process (no Dask)"
            return self
        from dask.distributed import Client
        if self.scheduler is not None:
            try:
                self.client = Client(self.scheduler, timeout="20s")
            except (OSError, TimeoutError) as exc:
                raise InputError(f"cannot reach the Dask scheduler ({exc})", key="--scheduler",
                                 value=self.scheduler) from None
            self.where = f"Dask cluster at {self.scheduler}"
        else:
            n = default_workers() if self.workers is None else int(self.workers)
            self.cluster = _local_cluster(n)
            self.client = Client(self.cluster)
            self.where = f"local Dask cluster (127.0.0.1), {n} worker process(es)"
        return self

    def __exit__(self, *exc):
        if self.client is not None:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()
        return False

    def run(self, payload: dict, chunks: list[list[int]]):
        """The tables of every chunk, in chunk order."""
        from .study import _run_chunk
        if self.client is None:
            return [_run_chunk(payload, k, idx)[1] for k, idx in enumerate(chunks)]
        # a fresh random key per candidate (hash=False) and released at the end: scattering
        # under a content-hash key that an earlier, released scatter used can cancel the new
        # tasks with "lost dependencies" (seen here on the third candidate of the demo;
        # dask/distributed issue 4612)
        remote = self.client.scatter(payload, broadcast=True, hash=False)
        futs = [self.client.submit(_run_chunk, remote, k, idx, pure=False, retries=2)
                for k, idx in enumerate(chunks)]
        out = {}
        try:
            for f in futs:
                k, table, _, _ = f.result()
                out[k] = table
        finally:
            for f in futs:
                if not f.done():
                    f.cancel()
            self.client.cancel([remote])
        return [out[k] for k in range(len(chunks))]


def _mm(L: float) -> str:
    return f"{L * 1e3:.6g} mm"


def size_to_confidence(case, level: float, deterministic, *, workers=None, scheduler=None,
                       progress=None) -> ConfidenceSizing:
    """The smallest buildable train of ``case`` whose probability of compliance under its
    [study] uncertainties is at least ``level`` (module docstring). ``deterministic`` is the
    :class:`~aftertreat.sizing.SizingResult` of the case; ``progress(text)`` is told each
    candidate."""
    from .cyclecase import parse_run_case
    from .sizing import _Designs
    from .study import auto_chunk_size, result_columns
    from .study_spec import case_hash
    t0 = time.perf_counter()
    spec = getattr(case, "study", None)
    if spec is None or not (spec.uncertain or spec.correlated):
        raise InputError("--confidence needs the case's uncertainties: a [study] table with "
                         "[[study.uncertain]] or [[study.correlated]] items (see "
                         "docs/study.md)", key="study", file=case.file)
    if spec.sweeps:
        raise InputError("--confidence sizes the train itself: remove the [[study.sweep]] "
                         "items (or run 'aftertreat study' for a sweep)", key="study.sweep",
                         file=case.file)
    if spec.design not in ("monte_carlo", "lhs"):
        raise InputError("--confidence draws its samples by Monte Carlo or Latin hypercube",
                         key="study.design", value=spec.design, file=case.file)
    if len(deterministic.train.bricks) != len(case.train.bricks):
        raise InputError("the deterministic sizing changed the number of bricks (build rules "
                         "min_layers / max_layers); --confidence sizes the case's bricks: fix "
                         "the layers in the case", key="sizing.build", file=case.file)
    base = deterministic.sized_data()
    sec = _Designs.sections(case)
    rules = case.sizing.build
    bricks = deterministic.train.bricks
    names = [b.name for b in bricks]
    n = spec.n_samples
    chunk = spec.chunk_size or auto_chunk_size(n)
    chunks = [list(range(a, min(a + chunk, n))) for a in range(0, n, chunk)]
    max_total = case.sizing.max_length_mm
    cache: dict[tuple, Candidate] = {}
    columns = None

    def data_for(lengths):
        import copy
        d = copy.deepcopy(base)
        for row, L in zip(d["brick"], lengths):
            for k in ("length", "length_mm"):
                row.pop(k, None)
            row["length"] = _mm(L)
        return d

    def evaluate(lengths) -> Candidate:
        nonlocal columns
        key = tuple(round(L, 9) for L in lengths)
        if key in cache:
            return cache[key]
        if len(cache) >= MAX_CANDIDATES:
            raise _Stop()
        data = data_for(lengths)
        cand_case = parse_run_case(data, case.file)
        if columns is None:
            from .evaluate import run_case
            columns = result_columns(run_case(cand_case), spec)
        h = case_hash(data, cand_case.train)
        from .reactor import _STRICT_RANGE
        payload = {"data": data, "file": str(case.file), "hash": h, "key": h + "-confidence",
                   "columns": [list(c) for c in columns], "overrides": [],
                   "strict": bool(_STRICT_RANGE[0])}
        if progress:
            progress("candidate " + ", ".join(f"{nm} {L * 1e3:.0f} mm"
                                               for nm, L in zip(names, lengths)))
        tables = pool.run(payload, chunks)
        passed = np.concatenate([np.asarray(t.column("passed").to_pylist(), dtype=bool)
                                 for t in tables])
        conv = np.concatenate([np.asarray(t.column("converged").to_pylist(), dtype=bool)
                               for t in tables])
        vol = sum(math.pi / 4 * b.diameter ** 2 * L for b, L in zip(bricks, lengths))
        c = Candidate(tuple(lengths), vol, Compliance("overall", int(passed.sum()), n),
                      int((~conv).sum()))
        cache[key] = c
        return c

    def steps(lengths, up: bool, stride: int = 1):
        """``stride`` build steps of each section, one candidate per section: each step
        grows its shortest brick (or shortens its longest one) by one step."""
        out = []
        for idx in (sec["SCR"], sec["ASC"]):
            if not idx:
                continue
            new = list(lengths)
            for _ in range(stride):
                pick = min(idx, key=lambda i: new[i]) if up else max(idx, key=lambda i: new[i])
                rule = rules[bricks[pick].substrate.kind]
                new[pick] = rule.next_up(new[pick]) if up else rule.next_down(new[pick])
            if all(abs(a - b) < 1e-9 for a, b in zip(new, lengths)):
                continue
            if up and max_total and sum(new) * 1e3 > max_total * (1 + 1e-9):
                continue
            out.append(tuple(new))
        return out

    start = tuple(b.length for b in bricks)
    note = ""
    with _Pool(workers, scheduler) as pool:
        det = evaluate(start)
        best = None
        try:
            cur, stride = det, 1
            while cur.compliance.probability < level:
                ups = [evaluate(x) for x in steps(cur.lengths_m, True, stride)] or \
                    [evaluate(x) for x in steps(cur.lengths_m, True, 1)]
                if not ups:
                    note = ("no buildable step is left (longest bricks, or the train's length "
                            "envelope) and the probability is still below the level")
                    break
                cur = max(ups, key=lambda c: (c.compliance.probability, -c.volume_m3))
                stride = min(2 * stride, 16)           # far from the level: longer strides
            if cur.compliance.probability >= level:
                best, stride = cur, max(1, stride // 4)
                while True:
                    downs = [evaluate(x) for x in steps(best.lengths_m, False, stride)]
                    ok = [c for c in downs if c.compliance.probability >= level]
                    if ok:
                        best = min(ok, key=lambda c: (c.volume_m3, -c.compliance.probability))
                    elif stride > 1:
                        stride //= 2                   # closer: finer steps, down to one
                    else:
                        break
        except _Stop:
            note = f"stopped after {MAX_CANDIDATES} candidate trains"
            ok = [c for c in cache.values() if c.compliance.probability >= level]
            best = min(ok, key=lambda c: c.volume_m3) if ok else None
        where = pool.where
    return ConfidenceSizing(level=level, samples=n, seed=spec.seed, feasible=best is not None,
                            brick_names=names, best=best, deterministic=det,
                            candidates=sorted(cache.values(), key=lambda c: c.volume_m3),
                            note=note, seconds=time.perf_counter() - t0, where=where)


class _Stop(Exception):
    """The candidate budget is spent."""

