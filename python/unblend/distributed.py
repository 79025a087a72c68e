"""Runs larger than one machine: the module mapped over a Parquet dataset by Dask.

Dask distributed schedules the work (one task per file, retries, worker
loss); this module only says what one task does. The library folder's
component files travel with the tasks as bytes, so workers need no shared
file system for it; input and output paths must be readable and writable
by every worker (a shared or object-store path).

    from dask.distributed import Client
    from unblend.distributed import fit_parquet_files

    client = Client("tcp://scheduler.example:8786")   # or LocalCluster()
    written = fit_parquet_files(client, input_paths, "results/", library="library")
"""

from __future__ import annotations

import hashlib
import os
import pathlib
import tempfile
from typing import Dict, List, Sequence

import pyarrow.parquet as pq

import unblend


def library_files(folder) -> Dict[str, bytes]:
    """A library folder's component files (`*.toml`), name → bytes."""
    folder = pathlib.Path(folder)
    files = {p.name: p.read_bytes() for p in sorted(folder.glob("*.toml"))}
    if not files:
        raise unblend.UnblendError(f"library folder {folder}: no component files (*.toml) there")
    return files


def _library_on_worker(files: Dict[str, bytes]) -> str:
    """Write the shipped files once per worker process; the folder's name is
    their digest, so a changed library is a new folder."""
    digest = hashlib.sha256()
    for name, data in sorted(files.items()):
        digest.update(name.encode() + b"\0" + data)
    folder = pathlib.Path(tempfile.gettempdir()) / f"unblend-library-{digest.hexdigest()[:16]}"
    if not folder.is_dir():
        staging = pathlib.Path(tempfile.mkdtemp(prefix="unblend-library-"))
        for name, data in files.items():
            (staging / name).write_bytes(data)
        try:
            staging.rename(folder)
        except OSError:
            pass  # another task of this worker got there first: same files
    return str(folder)


def fit_parquet_file(path: str, out_path: str, files: Dict[str, bytes], options: dict) -> str:
    """One task: fit the spectra of one Parquet file, write the tidy results.

    The output is written to a temporary name beside ``out_path`` and
    renamed when complete, so a failed task never leaves half a file.
    """
    table = pq.read_table(path)
    results = unblend.fit_arrow(table, library=_library_on_worker(files), **options)
    tmp = f"{out_path}.tmp-{os.getpid()}"
    pq.write_table(results, tmp)
    os.replace(tmp, out_path)
    return out_path


def fit_parquet_files(client, paths: Sequence[str], out_dir, library="library", **options) -> List[str]:
    """Fit every Parquet file of ``paths`` on a Dask cluster, one task per file.

    Results go to ``out_dir/<input name>`` (tidy Parquet, the columns of
    :data:`unblend.COLUMNS`); returns the written paths in input order.
    ``options`` are those of :func:`unblend.fit_arrow`.
    """
    os.makedirs(out_dir, exist_ok=True)
    names = [os.path.basename(p) for p in paths]
    if len(set(names)) != len(names):
        raise unblend.UnblendError("input files: expected distinct file names (outputs are named after them)")
    # One future for the whole folder (a dict would be scattered item by item).
    [shipped] = client.scatter([library_files(library)], broadcast=True)
    outs = [os.path.join(out_dir, n) for n in names]
    futures = client.map(
        fit_parquet_file, list(paths), outs, files=shipped, options=options, pure=False
    )
    return client.gather(futures)
