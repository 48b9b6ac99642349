"""The dataset of a study on disk: a folder with the manifest, the Parquet parts and the summary.

Layout of ``DIR``::

    DIR/study.json          manifest (aftertreat.study_manifest/1): case hash, seed, the
                            [study] items, samples, chunk size, the column schema
    DIR/samples/            the Parquet dataset (pyarrow): part-<chunk>.parquet, one per
                            chunk of samples, rows keyed by ``sample``
    DIR/summary.json        written at the end (aftertreat.study/1), with the figures

Every file is written to a temporary name in its folder and renamed into place (the rename is
atomic on one file system), so a part is there whole or not at all: a study that is stopped
(Ctrl-C, a lost worker or node) keeps every finished chunk, and ``--resume`` computes only the
chunks whose part is missing. Chunk ``k`` always holds samples ``[k c, (k + 1) c)`` for the
manifest's chunk size ``c``, so nothing is computed twice or lost. A folder that holds files is
refused unless resuming, and a resume is refused when the case hash, seed or study items differ
from the manifest's (naming what differs).

``pandas.read_parquet("DIR/samples")`` reads the dataset (rows in sample order); temporary
files start with ``.`` and are skipped by pyarrow.
"""
from __future__ import annotations

import json
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError
from .output import current_umask, to_json, write_atomic

__all__ = ["MANIFEST_SCHEMA", "StudyStore", "part_name", "arrow_schema"]

MANIFEST_SCHEMA = "aftertreat.study_manifest/1"
_MANIFEST = "study.json"
_SAMPLES = "samples"


def part_name(chunk: int) -> str:
    return f"part-{chunk:06d}.parquet"


def arrow_schema(columns: list[tuple[str, str]]):
    """The pyarrow schema of the rows: (name, type) with type one of int64, float64, bool,
    string."""
    import pyarrow as pa
    types = {"int64": pa.int64(), "float64": pa.float64(), "bool": pa.bool_(),
             "string": pa.string()}
    return pa.schema([(n, types[t]) for n, t in columns])


@dataclass
class StudyStore:
    """A study folder opened for writing (:meth:`open`)."""
    folder: Path
    manifest: dict

    @property
    def samples_dir(self) -> Path:
        return self.folder / _SAMPLES

    @property
    def n_chunks(self) -> int:
        n, c = self.manifest["n_samples"], self.manifest["chunk_size"]
        return (n + c - 1) // c

    def chunk_indices(self, chunk: int) -> range:
        c, n = self.manifest["chunk_size"], self.manifest["n_samples"]
        return range(chunk * c, min((chunk + 1) * c, n))

    @classmethod
    def open(cls, folder, manifest: dict, *, resume: bool) -> "StudyStore":
        """Create ``folder`` for a new study, or (``resume``) reopen the one whose manifest
        matches ``manifest`` (same case hash, seed and items; its chunk size is kept)."""
        folder = Path(folder)
        man = folder / _MANIFEST
        if folder.exists() and not folder.is_dir():
            raise InputError("expected a folder for the study dataset, and this is a file",
                             key="--out", value=str(folder))
        if resume:
            if not man.exists():
                raise InputError("nothing to resume: the folder holds no study manifest "
                                 f"({_MANIFEST})", key="--resume", value=str(folder))
            try:
                old = json.loads(man.read_text(encoding="utf-8"))
            except (OSError, ValueError) as exc:
                raise InputError(f"the study manifest cannot be read ({exc})", key="--resume",
                                 value=str(man)) from None
            for what, a, b in (("schema", old.get("schema"), MANIFEST_SCHEMA),
                               ("case hash (the case or a catalyst file changed)",
                                old.get("case_hash"), manifest["case_hash"]),
                               ("seed", old.get("seed"), manifest["seed"]),
                               ("design", old.get("design"), manifest["design"]),
                               ("samples", old.get("n_samples"), manifest["n_samples"]),
                               ("study items (study.sweep, study.uncertain, study.correlated)",
                                old.get("study"), manifest["study"]),
                               ("dataset columns", old.get("columns"), manifest["columns"])):
                if json.dumps(a, sort_keys=True) != json.dumps(b, sort_keys=True):
                    raise InputError(f"cannot resume: the {what} differs from the study in the "
                                     f"folder (folder: {_short(a)}; now: {_short(b)})",
                                     key="--resume", value=str(folder))
            store = cls(folder, old)
            for tmp in list(folder.glob(".*.tmp")) + list(store.samples_dir.glob(".*.tmp")):
                tmp.unlink()                   # a write that was cut short, never renamed
            return store
        if folder.exists() and any(folder.iterdir()):
            raise InputError("the folder exists and holds files: give another folder, or "
                             "--resume to continue the study in it", key="--out",
                             value=str(folder))
        folder.mkdir(parents=True, exist_ok=True)
        (folder / _SAMPLES).mkdir(exist_ok=True)
        write_atomic(man, to_json(manifest) + "\n")
        return cls(folder, manifest)

    def done_chunks(self) -> set[int]:
        """Chunks whose part is on disk with the expected samples."""
        import pyarrow.parquet as pq
        done = set()
        for p in self.samples_dir.glob("part-*.parquet"):
            try:
                k = int(p.stem.split("-")[1])
                meta = pq.read_metadata(p)
            except (ValueError, OSError, IndexError):
                continue
            if 0 <= k < self.n_chunks and meta.num_rows == len(self.chunk_indices(k)):
                done.add(k)
        return done

    def missing_chunks(self) -> list[int]:
        done = self.done_chunks()
        return [k for k in range(self.n_chunks) if k not in done]

    def write_chunk(self, chunk: int, table) -> None:
        """Write one chunk's rows (a pyarrow Table in the manifest's schema) atomically."""
        import pyarrow.parquet as pq
        want = list(self.chunk_indices(chunk))
        got = table.column("sample").to_pylist()
        if got != want:
            raise RuntimeError(f"chunk {chunk}: rows {got[:3]}... are not samples "
                               f"{want[:3]}...")
        path = self.samples_dir / part_name(chunk)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
        os.close(fd)
        try:
            pq.write_table(table, tmp)
            os.chmod(tmp, 0o666 & ~current_umask())
            os.replace(tmp, path)
        except BaseException:
            if os.path.exists(tmp):
                os.unlink(tmp)
            raise

    def read(self):
        """The whole dataset as a pyarrow Table, in sample order."""
        import pyarrow as pa
        import pyarrow.parquet as pq
        parts = sorted(self.samples_dir.glob("part-*.parquet"))
        if not parts:
            return arrow_schema([tuple(c) for c in self.manifest["columns"]]).empty_table()
        return pa.concat_tables([pq.read_table(p) for p in parts])

    def write_file(self, name: str, content) -> Path:
        path = self.folder / name
        write_atomic(path, content)
        return path


def _short(v) -> str:
    text = json.dumps(v, sort_keys=True, default=str)
    return text if len(text) <= 80 else text[:77] + "..."
