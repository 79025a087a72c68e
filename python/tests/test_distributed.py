"""The distributed recipe on a local Dask cluster of two worker processes.

Outside reference: the same spectra fitted in this process with
`unblend.fit_arrow` (single-process run); the cluster's Parquet output
must be identical, row for row and bit for bit.
"""

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import unblend
from conftest import mixtures

distributed = pytest.importorskip("dask.distributed")
from unblend.distributed import fit_parquet_files  # noqa: E402


def as_plain(table: pa.Table) -> pa.Table:
    """Dictionary columns decoded (each file has its own dictionaries)."""
    cols = {}
    for name in table.column_names:
        col = table.column(name)
        if pa.types.is_dictionary(col.type):
            col = col.cast(col.type.value_type)
        cols[name] = col
    return pa.table(cols)


def test_cluster_of_two_processes_matches_a_single_process_run(tmp_path, library_dir):
    spectra, wl, _ = mixtures(1200, seed=7)
    spectra[5, 3] = np.inf  # one bad spectrum travels as an error row
    names = [f"well-{i:04d}" for i in range(len(spectra))]
    columns = {f"{w:g}": spectra[:, j] for j, w in enumerate(wl)}
    whole = pa.table({"sample": names, **columns})
    inputs = tmp_path / "in"
    inputs.mkdir()
    paths = []
    for k, start in enumerate(range(0, len(names), 300)):
        p = inputs / f"part-{k}.parquet"
        pq.write_table(whole.slice(start, 300), p)
        paths.append(str(p))

    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None)
    with cluster, distributed.Client(cluster) as client:
        assert len(client.scheduler_info()["workers"]) == 2
        written = fit_parquet_files(client, paths, str(tmp_path / "out"), library=library_dir, baseline="linear")
        pids = client.run(lambda: __import__("os").getpid())
    assert len(set(pids.values())) == 2

    from_cluster = pa.concat_tables([as_plain(pq.read_table(p)) for p in written])
    single = as_plain(unblend.fit_arrow(whole, library=library_dir, baseline="linear"))
    assert from_cluster.num_rows == single.num_rows > 1200
    assert from_cluster.equals(single)
    assert from_cluster.column("error").null_count == from_cluster.num_rows - 1
