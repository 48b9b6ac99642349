"""Studies: many cycle runs of one case over its sweeps and uncertainties, on Dask.

:func:`run_study` takes a case with a ``[study]`` table (:mod:`aftertreat.study_spec`), plans
its samples (:mod:`aftertreat.sampling`), sends them to Dask workers in chunks, streams each
finished chunk to the Parquet dataset (:mod:`aftertreat.study_store`) and writes the summary
(:mod:`aftertreat.study_summary`) at the end.

Execution: by default a ``dask.distributed.LocalCluster`` of processes, one worker per core,
one thread each, bound to the loopback interface (127.0.0.1) with no dashboard; with
``scheduler`` an existing cluster (``dask scheduler`` / ``dask worker``, or any cluster
manager). ``workers=0`` runs the same chunks in this process, in order (no Dask): tests and
debugging. A worker parses the case once per process (a cache keyed by the case hash) and keeps
its compiled kernel warm; the numba kernel is loaded from its on-disk cache
(:mod:`aftertreat.solver`).

Chunks: about 64 per study and at most :data:`CHUNK_MAX` samples each; a demo-genset sample
takes about 0.3-0.5 s, so a chunk is several seconds of work against a few milliseconds of
scheduling (well under the 5 % overhead the design aims at; ``benchmarks/study_scale.py``
measures it).

Each sample is one :func:`aftertreat.evaluate.run_case` of the case with the sample's inputs
put in, solved cold (no warm start from another sample, so a row does not depend on which
samples a worker solved before it). A sample whose solve did not converge is flagged
(``converged`` false) and counts as failing every limit; a sample the case refuses (an input
outside a key's range) is kept with its ``error`` and counts as failing too.
"""
from __future__ import annotations

import math
import os
import time
from dataclasses import dataclass, field

from .errors import InputError

__all__ = ["CHUNK_MAX", "StudyPlan", "StudyRun", "StudyInterrupted", "ExecutionStats",
           "plan_study", "run_study", "evaluate_samples", "auto_chunk_size"]

#: Most samples in one chunk of a study (a chunk is one Dask task).
CHUNK_MAX = 50
#: Chunks a study aims at when the case does not give ``[study] chunk_size``.
_CHUNKS_AIM = 64
_META = [("sample", "int64"), ("seed", "int64"), ("case_hash", "string"),
         ("converged", "bool"), ("passed", "bool"), ("error", "string"),
         ("worst_ratio", "float64")]
_MODE_COLS = ("NOx_out_ppmvd", "NH3_out_ppmvd", "N2O_out_ppmvd", "NOx_out_ppm_wet",
              "NH3_out_ppm_wet", "T_out_C", "dp_kPa")


def auto_chunk_size(n_samples: int) -> int:
    """Samples per chunk: about ``n / 64``, within [1, :data:`CHUNK_MAX`]; it depends on the
    number of samples only (not on the workers)."""
    return max(1, min(CHUNK_MAX, math.ceil(n_samples / _CHUNKS_AIM)))


class StudyInterrupted(Exception):
    """A study stopped before every chunk was computed; the finished ones are on disk."""

    def __init__(self, done: int, total: int, reason: str):
        self.done, self.total, self.reason = done, total, reason
        super().__init__(f"{reason}: {done} of {total} chunks are in the dataset; run the same "
                         "command with --resume to compute the rest")


@dataclass(frozen=True)
class StudyPlan:
    """What a study computes: the case, its [study] spec, the case hash, the dataset columns
    ((name, type) pairs, from a run of the case as given) and that nominal run."""
    case: object
    spec: object
    case_hash: str
    columns: tuple[tuple[str, str], ...]
    nominal: object                    # CycleResult of the case as given (no study inputs)

    @property
    def n_samples(self) -> int:
        return self.spec.n_samples

    def manifest(self, chunk_size: int) -> dict:
        from .study_store import MANIFEST_SCHEMA
        s = self.spec
        return {"schema": MANIFEST_SCHEMA, "case": self.case.title, "file": str(self.case.file),
                "overrides": list(self.case.overrides), "case_hash": self.case_hash,
                "seed": s.seed, "design": s.design, "n_samples": s.n_samples,
                "chunk_size": int(chunk_size), "study": s.record(),
                "inputs": s.input_names(), "columns": [list(c) for c in self.columns]}

    def payload(self) -> dict:
        """What a worker needs to rebuild the case (the data as read after --set)."""
        import hashlib
        import json
        spec = json.dumps(self.spec.record(), sort_keys=True, default=str)
        key = hashlib.sha256((self.case_hash + spec).encode()).hexdigest()
        from .reactor import _STRICT_RANGE
        return {"data": self.case.data, "file": str(self.case.file), "hash": self.case_hash,
                "key": key, "columns": list(self.columns),
                "overrides": list(self.case.overrides), "strict": bool(_STRICT_RANGE[0])}


@dataclass(frozen=True)
class ExecutionStats:
    """How the study ran: workers, wall time of the computation [s] (from the first chunk sent
    to the last one written, after the workers were started and warmed up: ``startup_s``),
    summed compute time of the chunks in the workers [s], samples computed, the scheduler
    overhead share 1 - compute / (wall x workers) (scheduling, transfers, writing the parts
    and workers idle at the end), and the resident memory of each worker at the end [MB]."""
    workers: int
    where: str
    wall_s: float
    compute_s: float
    samples: int
    memory_MB: tuple[float, ...] = ()
    startup_s: float = 0.0
    cpu_s: float = 0.0

    @property
    def cpu_share(self) -> float:
        """CPU time over wall time of the chunks in the workers: below 1 when the workers
        waited for a core (other programs on the machine, or more workers than cores)."""
        return self.cpu_s / self.compute_s if self.compute_s > 0 else float("nan")

    @property
    def samples_per_s(self) -> float:
        return self.samples / self.wall_s if self.wall_s > 0 else float("nan")

    @property
    def overhead_share(self) -> float:
        cap = self.wall_s * max(self.workers, 1)
        return 1.0 - self.compute_s / cap if cap > 0 else float("nan")

    def to_dict(self) -> dict:
        return {"workers": self.workers, "where": self.where, "wall_s": self.wall_s,
                "compute_s": self.compute_s, "samples_computed": self.samples,
                "samples_per_s": self.samples_per_s, "overhead_share": self.overhead_share,
                "memory_per_worker_MB": list(self.memory_MB), "startup_s": self.startup_s,
                "cpu_s": self.cpu_s, "cpu_share_of_chunk_time": self.cpu_share}


@dataclass
class StudyRun:
    """A finished study: its plan, folder, summary (:class:`~aftertreat.study_summary.
    StudySummary`), how it ran, and the files written."""
    plan: StudyPlan
    folder: str
    summary: object
    stats: ExecutionStats
    files: list[str] = field(default_factory=list)
    resumed_chunks: int = 0

    def to_json(self) -> dict:
        return self.summary.to_json() | {"execution": self.stats.to_dict(),
                                         "folder": self.folder, "files": self.files,
                                         "chunks_already_done": self.resumed_chunks}


# ---- one sample -------------------------------------------------------------------------------
def _check_key(names: list[str]) -> list[str]:
    """Unique column stems for the limit checks (a repeated name gets ' #2', ...)."""
    out, seen = [], {}
    for n in names:
        seen[n] = seen.get(n, 0) + 1
        out.append(n if seen[n] == 1 else f"{n} #{seen[n]}")
    return out


def _limit_stems(res) -> list[str]:
    return _check_key([f"limit.{c.name} [{c.basis}]" for c in res.limits])


def result_columns(res, spec) -> list[tuple[str, str]]:
    """The dataset columns for results shaped like ``res`` (a CycleResult)."""
    text = spec.text_inputs()
    cols = list(_META)
    cols += [(f"x.{n}", "string" if n in text else "float64") for n in spec.input_names()]
    for m in res.modes:
        cols += [(f"mode.{m.name}.{c}", "float64") for c in _MODE_COLS]
        cols.append((f"mode.{m.name}.converged", "bool"))
    cols += [(f"cycle.{k}", "float64") for k in res.cycle]
    for stem in _limit_stems(res):
        cols += [(f"{stem}.value", "float64"), (f"{stem}.limit", "float64"),
                 (f"{stem}.pass", "bool")]
    return cols


def result_row(res) -> dict:
    """One row's result columns from a CycleResult (units in every name)."""
    row = {"converged": bool(res.converged)}
    for m in res.modes:
        e = m.emissions()
        pre = f"mode.{m.name}."
        row.update({pre + "NOx_out_ppmvd": e["ppmvd"]["NOx"], pre + "NH3_out_ppmvd":
                    e["ppmvd"]["NH3"], pre + "N2O_out_ppmvd": e["ppmvd"]["N2O"],
                    pre + "NOx_out_ppm_wet": m.outlet.ppm("NOx"),
                    pre + "NH3_out_ppm_wet": m.outlet.ppm("NH3"),
                    pre + "T_out_C": m.summary()["T_out_C"],
                    pre + "dp_kPa": m.solution.dp_Pa / 1e3,
                    pre + "converged": bool(m.solution.converged)})
    row.update({f"cycle.{k}": float(v) for k, v in res.cycle.items()})
    ratios = []
    for stem, c in zip(_limit_stems(res), res.limits):
        row[f"{stem}.value"] = float(c.value)
        row[f"{stem}.limit"] = float("nan") if c.limit is None else float(c.limit)
        row[f"{stem}.pass"] = bool(c.passed)
        if c.ratio is not None:
            ratios.append(c.ratio)
    row["worst_ratio"] = float(max(ratios)) if ratios else float("nan")
    row["passed"] = bool(res.passed)
    return row


class _Context:
    """One process's copy of a study: the parsed case and its spec (built once, by hash)."""

    def __init__(self, payload: dict):
        from .cyclecase import parse_run_case
        from .study_spec import strip_study
        self.case = parse_run_case(payload["data"], payload["file"])
        self.spec = self.case.study
        self.base = strip_study(payload["data"])
        self.file = payload["file"]
        self.hash = payload["hash"]
        self.columns = [tuple(c) for c in payload["columns"]]
        self.actions = self.spec.actions()


_CONTEXTS: dict[str, _Context] = {}


def _context(payload: dict) -> _Context:
    """This process's copy of the study, by the key of its case and items (built once)."""
    ctx = _CONTEXTS.get(payload["key"])
    if ctx is None:
        if len(_CONTEXTS) > 8:
            _CONTEXTS.clear()
        ctx = _CONTEXTS[payload["key"]] = _Context(payload)
    return ctx


def _sample_row(ctx: _Context, index: int, inputs: dict) -> dict:
    from .cyclecase import parse_run_case
    from .evaluate import run_case
    from .study_spec import apply_inputs, perturb_train
    row = {"sample": int(index), "seed": int(ctx.spec.seed), "case_hash": ctx.hash,
           "error": "", "converged": False, "passed": False, "worst_ratio": float("nan")}
    row.update({f"x.{k}": v for k, v in inputs.items()})
    try:
        data, cat = apply_inputs(ctx.base, ctx.file, ctx.actions, inputs)
        case = parse_run_case(data, ctx.file)
        train = perturb_train(case.train, cat)
        res = run_case(case, train=train)
    except InputError as exc:
        row["error"] = f"the case refuses this sample's inputs: {exc}"
        return row
    row.update(result_row(res))
    return row


def evaluate_samples(payload: dict, indices) -> "object":
    """Rows of the samples ``indices`` as a pyarrow Table in the dataset's schema."""
    import pyarrow as pa
    from .study_store import arrow_schema
    ctx = _context(payload)
    rows = [_sample_row(ctx, i, x) for i, x in zip(indices, ctx.spec.inputs(indices))]
    schema = arrow_schema(ctx.columns)
    cols = {}
    for name, typ in ctx.columns:
        vals = [r.get(name) for r in rows]
        if typ == "float64":
            vals = [float("nan") if v is None else float(v) for v in vals]
        cols[name] = vals
    return pa.Table.from_pydict(cols, schema=schema)


def _run_chunk(payload: dict, chunk: int, indices: list[int]):
    """One Dask task: (chunk, table, wall seconds, CPU seconds of this process). The
    ``--strict`` temperature rule of the command holds in the worker for the chunk."""
    from .reactor import _STRICT_RANGE, set_strict_temperature_range
    t0, c0 = time.perf_counter(), time.process_time()
    before = _STRICT_RANGE[0]
    set_strict_temperature_range(payload.get("strict", False))
    try:
        table = evaluate_samples(payload, indices)
    finally:
        set_strict_temperature_range(before)
    return chunk, table, time.perf_counter() - t0, time.process_time() - c0


def _warm(payload: dict) -> float:
    """Build this process's copy of the case and solve it once (loads the compiled kernel);
    returns the seconds it took."""
    from .evaluate import run_case
    t0 = time.perf_counter()
    run_case(_context(payload).case)
    return time.perf_counter() - t0


def _rss_MB() -> float:
    try:
        import psutil
        return psutil.Process().memory_info().rss / 2 ** 20
    except ImportError:                                    # pragma: no cover
        import resource
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


# ---- planning -------------------------------------------------------------------------------
def plan_study(case) -> StudyPlan:
    """Check that ``case`` has a [study] with something to vary, run the case as given once
    (it fixes the dataset's columns) and hash it."""
    from .evaluate import run_case
    from .study_spec import case_hash
    spec = getattr(case, "study", None)
    if spec is None:
        raise InputError("the case has no [study] table (see docs/study.md)", key="study",
                         file=case.file)
    if not (spec.sweeps or spec.uncertain or spec.correlated):
        raise InputError("the study varies nothing: give [[study.sweep]], [[study.uncertain]] "
                         "or [[study.correlated]] items", key="study", file=case.file)
    if spec.design == "grid" and not spec.sweeps:
        raise InputError("a grid design needs at least one [[study.sweep]] item (for Monte "
                         "Carlo alone use design = \"monte_carlo\")", key="study.design",
                         value="grid", file=case.file)
    if case.transient is not None and case.cycle is None:
        raise InputError("a study runs the modes of [cycle]", key="study", file=case.file)
    nominal = run_case(case)
    cols = tuple(result_columns(nominal, spec))
    return StudyPlan(case=case, spec=spec, case_hash=case_hash(case.data, case.train),
                     columns=cols, nominal=nominal)


# ---- running ----------------------------------------------------------------------------------
def _local_cluster(workers: int):
    import logging
    from dask.distributed import LocalCluster
    return LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                        host="127.0.0.1", dashboard_address=None,
                        silence_logs=logging.ERROR)


def default_workers() -> int:
    """One worker per core of this machine."""
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity")
               else (os.cpu_count() or 1))


@dataclass
class _Tally:
    """The chunks a run has written so far, and what they cost: each finished chunk goes into
    the store once (:meth:`add`), then the counters and the progress line follow."""
    store: object
    progress: object
    done_samples: int
    total: int
    compute: float = 0.0
    cpu: float = 0.0
    computed: int = 0
    written: int = 0

    def add(self, k: int, table, sec: float, cpu_s: float) -> None:
        self.store.write_chunk(k, table)
        self.written += 1
        self.compute += sec
        self.cpu += cpu_s
        self.computed += table.num_rows
        self.done_samples += table.num_rows
        if self.progress:
            self.progress(self.done_samples, self.total)


def run_study(case, out, *, resume: bool = False, scheduler: str | None = None,
              workers: int | None = None, progress=None, plan: StudyPlan | None = None,
              write_figures: bool = True) -> StudyRun:
    """Run the study of ``case`` into the folder ``out`` (see :mod:`aftertreat.study_store`).

    ``workers``: local Dask workers (default one per core); 0 runs in this process without
    Dask. ``scheduler``: the address of an existing Dask scheduler (``workers`` is then what
    the cluster has). ``progress(done_samples, total_samples)`` is called as chunks finish.
    Raises :class:`StudyInterrupted` (finished chunks kept) on Ctrl-C or a failed task."""
    from .study_store import StudyStore
    from .study_summary import summarise, write_outputs
    plan = plan_study(case) if plan is None else plan
    chunk = case.study.chunk_size or auto_chunk_size(plan.n_samples)
    store = StudyStore.open(out, plan.manifest(chunk), resume=resume)
    missing = store.missing_chunks()
    done_before = store.n_chunks - len(missing)
    total = plan.n_samples
    done_samples = total - sum(len(store.chunk_indices(k)) for k in missing)
    if progress:
        progress(done_samples, total)
    payload = plan.payload()
    t_start = time.perf_counter()
    tally = _Tally(store=store, progress=progress, done_samples=done_samples, total=total)
    if workers == 0 and scheduler is None:
        n_workers, where = 1, "this process (no Dask)"
        if missing:
            _warm(payload)
            if progress:
                progress(done_samples, total)         # the rate counts from here
        t0 = time.perf_counter()
        try:
            for k in missing:
                tally.add(*_run_chunk(payload, k, list(store.chunk_indices(k))))
        except KeyboardInterrupt:
            raise StudyInterrupted(done_before + tally.written, store.n_chunks,
                                   "interrupted") from None
        memory = (_rss_MB(),)
        wall = time.perf_counter() - t0
    else:
        memory, n_workers, where, t0, wall = _run_dask(
            tally, missing, payload, scheduler, workers, done_before)
    stats = ExecutionStats(workers=n_workers, where=where, wall_s=wall, compute_s=tally.compute,
                           samples=tally.computed, memory_MB=memory, startup_s=t0 - t_start,
                           cpu_s=tally.cpu)
    table = store.read()
    summary = summarise(plan, table)
    files = write_outputs(store, plan, table, summary, stats, figures=write_figures)
    return StudyRun(plan=plan, folder=str(store.folder), summary=summary, stats=stats,
                    files=files, resumed_chunks=done_before)


def _run_dask(tally: _Tally, missing, payload, scheduler, workers, done_before):
    """The missing chunks on Dask, each recorded in ``tally`` as it finishes; returns the
    workers' memory, their number, where they ran, the start of the computation and its wall
    time."""
    from dask.distributed import Client, as_completed
    cluster = None
    if scheduler is not None:
        try:
            client = Client(scheduler, timeout="20s")
        except (OSError, TimeoutError) as exc:
            raise InputError(f"cannot reach the Dask scheduler ({exc})", key="--scheduler",
                             value=scheduler) from None
        where = f"Dask cluster at {scheduler}"
    else:
        n = default_workers() if workers is None else int(workers)
        cluster = _local_cluster(n)
        client = Client(cluster)
        where = f"local Dask cluster (127.0.0.1), {n} worker process(es)"
    store, progress = tally.store, tally.progress
    memory: tuple[float, ...] = ()
    futures = []
    try:
        n_workers = max(1, len(client.scheduler_info().get("workers", {})))
        remote = client.scatter(payload, broadcast=True, hash=False)   # see study_sizing._Pool
        if missing:
            client.run(_warm, payload)
            if progress:
                progress(tally.done_samples, tally.total)    # the rate counts from here
        t0 = time.perf_counter()
        tag = payload["key"][:12]
        futures = [client.submit(_run_chunk, remote, k, list(store.chunk_indices(k)),
                                 key=f"aftertreat-study-{tag}-{k}", pure=False, retries=2)
                   for k in missing]
        try:
            for fut in as_completed(futures):
                try:
                    k, table, sec, cpu_s = fut.result()
                except Exception as exc:            # a task that failed after its retries
                    raise StudyInterrupted(done_before + tally.written, store.n_chunks,
                                           f"a chunk failed on the cluster ({type(exc).__name__}"
                                           f": {exc})") from None
                fut.release()
                tally.add(k, table, sec, cpu_s)
        except KeyboardInterrupt:
            raise StudyInterrupted(done_before + tally.written, store.n_chunks,
                                   "interrupted") from None
        wall = time.perf_counter() - t0
        try:
            memory = tuple(sorted(client.run(_rss_MB).values()))
        except Exception:                            # a worker gone at the end: no figure
            memory = ()
    finally:
        for f in futures:
            if not f.done():
                f.cancel()
        client.close()
        if cluster is not None:
            cluster.close()
    return memory, n_workers, where, t0, wall
