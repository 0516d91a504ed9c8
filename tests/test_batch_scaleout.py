"""Scale-out with Dask: a LocalCluster on loopback gives the same numbers as the local path."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from bandsolve.batch.predict import EVAL_ROWS, evaluate_set, predict_inputs
from bandsolve.calibration.build import build_cls
from bandsolve.calibration.build_pls import build_pls
from bandsolve.concentrations import ConcentrationTable
from bandsolve.io import write_spectra_csv
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

da = pytest.importorskip("dask.array")
dd = pytest.importorskip("dask.dataframe")
distributed = pytest.importorskip("distributed")

from bandsolve.batch.scaleout import numeric_columns, predict_dask  # noqa: E402

AXIS = np.linspace(400.0, 700.0, 101)
PURE = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")


def _spectra(n: int, rs: int) -> tuple[SpectralSet, np.ndarray]:
    rng = np.random.default_rng(rs)
    C = rng.uniform(0.1, 1.0, (n, 3))
    X = C @ PURE + 0.001 * rng.standard_normal((n, AXIS.size))
    return SpectralSet(axis=AXIS, values=X, sample_ids=[f"row{i}" for i in range(n)]), C


@pytest.fixture(scope="module")
def models():
    cal, C = _spectra(30, 1)
    table = ConcentrationTable(cal.sample_ids, LABELS, C)
    return {"cls": build_cls(cal, table),
            "pls": build_pls(cal, table, cv="contiguous:5", max_components=5)}


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  protocol="tcp", host="127.0.0.1",
                                  dashboard_address=None) as c:
        yield c


@pytest.mark.slow
@pytest.mark.parametrize("method", ["cls", "pls"])
def test_batch_on_a_local_cluster_equals_the_local_batch(models, cluster, tmp_path, method):
    model = models[method]
    files = []
    for k, n in enumerate((EVAL_ROWS + 30, 11)):
        s, _ = _spectra(n, 10 + k)
        files.append(str(tmp_path / f"in{k}.csv"))
        write_spectra_csv(s, files[-1])
    local = predict_inputs(model, files, read_options={"layout": "wide"}, chunk_size=300)
    remote = predict_inputs(model, files, read_options={"layout": "wide"}, chunk_size=300,
                            scheduler=cluster.scheduler_address)
    # Identical, not merely close: the issue asks for the same numbers on the cluster.
    pd.testing.assert_frame_equal(remote.table, local.table, check_exact=True)


@pytest.mark.slow
@pytest.mark.parametrize("method", ["cls", "pls"])
def test_dask_array_and_dataframe_equal_the_local_path(models, cluster, method):
    model = models[method]
    spectra, _ = _spectra(2 * EVAL_ROWS + 77, 20)
    ref = evaluate_set(model, spectra)
    with distributed.Client(cluster):
        lazy = predict_dask(model, da.from_array(spectra.values, chunks=(333, -1)))
        got = lazy.compute()
        frame = pd.DataFrame(spectra.values, index=list(spectra.sample_ids),
                             columns=[str(a) for a in AXIS])
        parts = dd.from_pandas(frame, chunksize=EVAL_ROWS, sort=False)
        table = predict_dask(model, parts).compute()
    cols = numeric_columns(model)
    assert got.shape == (spectra.n_samples, len(cols))
    np.testing.assert_array_equal(got[:, :-1], ref[cols[:-1]].to_numpy(float))
    assert ((got[:, -1] > 0) == (ref["flag_codes"] != "").to_numpy()).all()
    table = table.reset_index(drop=True)
    assert list(table["sample"]) == list(ref["sample"])
    np.testing.assert_array_equal(table[cols[:-1]].to_numpy(float), ref[cols[:-1]].to_numpy(float))
