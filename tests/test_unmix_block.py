"""One block of unmix (mixsolve.solve.block): tasks, threads, refusals.

The result of a block must not depend on how it is cut into tasks or how many threads
share them (each spectrum's fit is its own problem); checked against the same block fitted
in one piece. Infinity is refused with check_spectra's message whether the spectra are
numpy- or dask-backed. Data invented (Gaussian bands, seeded noise).
"""

from __future__ import annotations

import dataclasses
import itertools

import numpy as np
import pytest
import xarray as xr

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.solve import block as block_module
from mixsolve.solve.block import PlainFit, ShiftFit, WeightedFit, unmix_block
from mixsolve.solve.outputs import kernel_outputs, result_outputs


@pytest.fixture
def spectra(molar_library: xr.Dataset, rng: np.random.Generator) -> xr.DataArray:
    """300 noisy invented mixtures, some components absent, one missing reading."""
    eps = molar_library["absorptivity"].transpose("component", "wavelength").values
    conc = rng.uniform(0, 5e-5, (300, 3))
    conc[rng.random(conc.shape) < 0.3] = 0
    values = conc @ eps + 0.004 * rng.standard_normal((300, eps.shape[1]))
    values[17, 4] = np.nan
    return ms.make_spectra(values, molar_library["wavelength"].values)


def settings_of(spectra: xr.DataArray, library: xr.Dataset, monkeypatch: pytest.MonkeyPatch,
                **options: object) -> tuple[np.ndarray, object]:
    """The array and BlockSettings that unmix hands to unmix_block."""
    seen = {}
    original = block_module.unmix_block

    def spy(values: np.ndarray, b: np.ndarray, settings: object) -> tuple:
        seen["args"] = (values, settings)
        return original(values, b, settings)

    monkeypatch.setattr("mixsolve.solve.unmix.unmix_block", spy)
    ms.unmix(spectra, library, **options)
    return seen["args"]


@pytest.mark.parametrize("threads", [1, 3])
def test_tasks_and_threads_do_not_change_the_result(spectra, molar_library, monkeypatch,
                                                    threads: int) -> None:
    """Cut into tasks of 37 spectra, shared by 1 or 3 threads: the one-piece result."""
    values, settings = settings_of(spectra, molar_library, monkeypatch, noise=0.004,
                                   baseline="offset")
    whole = unmix_block(values, np.ones(1), dataclasses.replace(settings, threads=1))
    monkeypatch.setattr(block_module, "TASK_SPECTRA", 37)
    cut = unmix_block(values, np.ones(1), dataclasses.replace(settings, threads=threads))
    names = [o.name for o in kernel_outputs(shift=False)]
    for name, a, b in zip(names, whole, cut, strict=True):
        if a.dtype.kind == "f":
            np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-15, equal_nan=True,
                                       err_msg=name)
        else:
            np.testing.assert_array_equal(a, b, err_msg=name)


@pytest.mark.parametrize(("options", "kind"), [
    ({}, PlainFit), ({"weights": "noise", "noise": 0.004}, WeightedFit),
    ({"fit_shift": True, "window": (420, 680)}, ShiftFit)])
def test_the_result_is_built_from_the_output_descriptions(spectra, molar_library,
                                                          monkeypatch, options, kind) -> None:
    """The fit asked for reaches the kernel as its typed kind; the result holds exactly
    the described variables, in their order, with their dims, dtypes and units; unmix's
    docstring lists each one."""
    _, settings = settings_of(spectra, molar_library, monkeypatch, **options)
    assert type(settings.fit) is kind
    result = ms.unmix(spectra, molar_library, unit="µmol/L", baseline="offset", **options)
    described = result_outputs(shift=kind is ShiftFit)
    assert list(result.data_vars) == [o.name for o in described]
    for o in described:
        var = result[o.name]
        assert var.dims[len(var.dims) - len(o.dims):] == o.dims, o.name
        assert var.dtype == np.dtype(o.dtype), o.name
        want = None if o.unit is None else o.unit.format(unit="µmol/L")
        assert var.attrs.get("units") == want, o.name
        assert f"``{o.name}``" in ms.unmix.__doc__
    assert result["concentration"].attrs == {"units": "µmol/L"}
    assert result["suggested_dilution"].attrs["meaning"].startswith("dilution factor")


def test_tasks_are_equal_and_a_multiple_of_the_threads() -> None:
    """No thread is left with an extra task at the end; every spectrum is in one task."""
    tasks = block_module._tasks(100_000, 2)
    sizes = [t.stop - t.start for t in tasks]
    assert len(tasks) % 2 == 0 and max(sizes) - min(sizes) <= 1
    assert max(sizes) <= block_module.TASK_SPECTRA
    assert tasks[0].start == 0 and tasks[-1].stop == 100_000
    assert all(a.stop == b.start for a, b in itertools.pairwise(tasks))
    assert block_module._tasks(0, 2) == [slice(0, 0)]


@pytest.mark.parametrize("options", [{}, {"weights": "noise", "noise": 0.004},
                                     {"fit_shift": True, "window": (420, 680)}])
def test_infinity_is_refused(spectra, molar_library, options) -> None:
    """An infinite reading: one line naming the spectrum and wavelength (eager), or
    check_spectra's message when a lazy result is computed."""
    bad = spectra.copy()
    bad.values[205, 5] = np.inf  # 425 nm: inside the shift fit's window too
    with pytest.raises(InputError, match=r"spectra: absorbance is infinite at sample "
                                         r"sample_206, 425 nm; use NaN for a missing "
                                         r"reading"):
        ms.unmix(bad, molar_library, **options)
    pytest.importorskip("dask")
    lazy = ms.unmix(bad.chunk({"sample": 100}), molar_library, **options)
    with pytest.raises(InputError, match=r"spectra: absorbance values include infinity; "
                                         r"use NaN for a missing reading"):
        lazy.compute()


def test_infinity_in_an_image_cube_is_located(molar_library, rng) -> None:
    """Over y and x the refusal names both positions (no coordinates: indices)."""
    wl = molar_library["wavelength"].values
    cube = xr.DataArray(rng.uniform(0, 1, (3, 4, wl.size)), dims=("y", "x", "wavelength"),
                        coords={"wavelength": wl})
    cube.values[2, 1, 0] = -np.inf
    with pytest.raises(InputError, match=r"absorbance is infinite at y 2, x 1, 400 nm"):
        ms.unmix(cube, molar_library)


def test_one_engine_for_the_whole_job(spectra, molar_library, monkeypatch) -> None:
    """The engine is chosen from the job's size, not from each chunk's: 300 spectra in
    chunks of 100, above a lowered threshold of 200, are all fitted by compiled code."""
    pytest.importorskip("dask")
    pytest.importorskip("numba")
    from mixsolve.solve import engine

    monkeypatch.delenv(engine.ENGINE_VARIABLE, raising=False)
    monkeypatch.setattr(engine, "COMPILED_MIN_SPECTRA", 200)
    seen = []
    original = block_module.fit_spectra

    def spy(*args: object, **kwargs: object) -> object:
        seen.append(kwargs.get("engine"))
        return original(*args, **kwargs)

    monkeypatch.setattr(block_module, "fit_spectra", spy)
    ms.unmix(spectra.chunk({"sample": 100}), molar_library).compute()
    assert seen == ["compiled"] * 3


def test_concurrent_calls_restore_the_blas_threads(spectra, molar_library,
                                                   monkeypatch) -> None:
    """Blocks running in several threads at once limit BLAS to one thread while they run
    and leave it as they found it (threadpoolctl's view), whatever order they end in."""
    from concurrent.futures import ThreadPoolExecutor

    from threadpoolctl import threadpool_info

    monkeypatch.setattr(block_module, "TASK_SPECTRA", 37)
    monkeypatch.setattr("mixsolve.solve.unmix.default_threads", lambda: 2)

    def blas_threads() -> list[int]:
        return [i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas"]

    before = blas_threads()
    with ThreadPoolExecutor(max_workers=4) as pool:
        runs = [pool.submit(ms.unmix, spectra, molar_library) for _ in range(4)]
    for run in runs:
        run.result()  # re-raises an error raised in the thread
    assert blas_threads() == before
