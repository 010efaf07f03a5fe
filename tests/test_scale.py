"""Dask scale-out (issue 10 item 4): a local cluster of two worker processes gives results
identical (bit for bit) to the single-process run; the deterministic fit on Dask agrees."""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from core.decline import DeclineSettings, fit_field
from core.probabilistic import probabilistic_field
from core.production import load_production
from core.scale import dask_client, fit_field_dask, map_chunks
from core.validation import InputError

pytest.importorskip("distributed")


def _wells(n, seed):
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(n):
        k = int(rng.integers(30, 90))
        months = pd.period_range(end=pd.Period("2026-10", "M"), periods=k, freq="M").to_timestamp()
        t = (np.arange(k) + 0.5) / 12.0
        qi, di, b = rng.uniform(50, 400), rng.uniform(0.2, 1.0), rng.uniform(0.0, 1.2)
        rate = qi / (1 + max(b, 1e-9) * di * t) ** (1 / max(b, 1e-9)) * np.exp(rng.normal(0, 0.08, k))
        dim = months.days_in_month.to_numpy()
        rows.append(pd.DataFrame({"well_id": f"SC-{i:03d}", "month": months, "oil_bbl": rate * dim,
                                  "days_on": dim, "unit": "U1"}))
    return load_production(pd.concat(rows, ignore_index=True), file_name="scale").production


@pytest.fixture(scope="module")
def client():
    # one local cluster for the module: two worker processes, one thread each (the default)
    with dask_client("local", n_workers=2) as c:
        yield c


@pytest.fixture(scope="module")
def field():
    prod = _wells(30, seed=4)
    st = DeclineSettings(econ_limit_bopd=3.0, streams=("oil",), horizon_years=20.0)
    return prod, st, fit_field(prod, settings=st)


def test_dask_run_equals_single_process_exactly(client, field):
    prod, st, ff = field
    kw = dict(settings=st, samples=40, seed=9, level_error=0.08, cum_months=24, chunk_wells=4)
    single = probabilistic_field(prod, ff, **kw)
    dist = probabilistic_field(prod, ff, scheduler=client, **kw)
    pd.testing.assert_frame_equal(dist.wells, single.wells, check_exact=True)
    pd.testing.assert_frame_equal(dist.monthly, single.monthly, check_exact=True)
    pd.testing.assert_frame_equal(dist.field, single.field, check_exact=True)
    pd.testing.assert_frame_equal(dist.field_monthly, single.field_monthly, check_exact=True)
    assert np.array_equal(dist.remaining_samples, single.remaining_samples)
    # the work really ran on both workers' processes (not silently in this process)
    assert len(client.scheduler_info()["workers"]) == 2


def test_dask_auto_calibration_equals_single_process(client, field):
    prod, st, ff = field
    kw = dict(settings=st, samples=30, seed=2, chunk_wells=8)
    single = probabilistic_field(prod, ff, **kw)
    dist = probabilistic_field(prod, ff, scheduler=client, **kw)
    pd.testing.assert_frame_equal(dist.wells, single.wells, check_exact=True)
    assert np.array_equal(dist.calibration.pool, single.calibration.pool)
    # the trend (decline) error is drawn too, on the workers, with the same numbers
    assert single.calibration.trend_sd > 0.0
    assert np.array_equal(dist.calibration.trend_pool, single.calibration.trend_pool)
    pd.testing.assert_frame_equal(dist.field, single.field, check_exact=True)
    assert np.array_equal(dist.eur_samples, single.eur_samples)


def test_map_chunks_keeps_order(client):
    # partitions of contiguous chunks, gathered in order
    out = map_chunks(abs, list(range(-23, 0)), scheduler=client, partitions=5)
    assert out == [abs(x) for x in range(-23, 0)]
    assert map_chunks(abs, [-1, -2], scheduler=None) == [1, 2]


def test_fit_field_on_dask_agrees_with_single_process(client, field):
    prod, st, ff = field
    dist = fit_field_dask(prod, scheduler=client, settings=st, wells_per_partition=7)
    a = ff.fits.sort_values(["well_id", "stream"]).reset_index(drop=True)
    b = dist.fits.sort_values(["well_id", "stream"]).reset_index(drop=True)
    assert list(a["well_id"]) == list(b["well_id"])
    assert (a["model"] == b["model"]).all()
    # padding of the batches differs: parameters agree to rounding (rtol 1e-9)
    assert_allclose(b["qi"], a["qi"], rtol=1e-9)
    assert_allclose(b["di"], a["di"], rtol=1e-9)
    assert_allclose(b["b"], a["b"], rtol=1e-9, atol=1e-12)


def test_bad_scheduler_raises():
    with pytest.raises(InputError, match="scheduler"):
        with dask_client(42):
            pass
