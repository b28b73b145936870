"""What a PLS model is: its kind and format version, its flag codes, and the check of both.

A PLS model is an :class:`xarray.Dataset` holding everything prediction needs: the
wavelength grid, the preprocessing (Savitzky–Golay first derivative, centring, scaling),
weights and loadings per model block, the cross-validation figures and the Hotelling T² and
Q-residual limits. Its contents are listed in :func:`mixsolve.pls.calibrate.calibrate`,
its file in :mod:`mixsolve.io.model_store`, its use in docs/calibration.md.

Model blocks: ``pls2`` is one block predicting every component; ``pls1`` is one block per
component. Block arrays are padded with NaN beyond the block's number of latent variables.

The PLS code is split by job: :mod:`~mixsolve.pls.reference` (known
concentrations), :mod:`~mixsolve.pls.preprocessing` (window, derivative, centring,
scaling), :mod:`~mixsolve.pls.blocks` (one block: fit and projection),
:mod:`~mixsolve.pls.limits` (T² and Q limits), :mod:`~mixsolve.pls.cross_validation`
(folds, cross-validation, number of latent variables), :mod:`~mixsolve.pls.compare`
(CLS on the same folds), :mod:`~mixsolve.pls.calibrate` (:func:`calibrate`) and
:mod:`~mixsolve.pls.predict` (:func:`predict`).
"""

from __future__ import annotations

from typing import Any

import xarray as xr

from mixsolve.errors import InputError

#: ``mixsolve_kind`` attribute of a PLS model (a library has ``"mixsolve-library"``).
MODEL_KIND = "mixsolve-pls-model"
#: Newest model layout this mixsolve writes and reads.
FORMAT_VERSION = 1
#: How the standard uncertainty of a prediction is obtained (kept with every result).
UNCERTAINTY_BASIS = (
    "approximation from cross-validation and leverage: u = RMSECV * sqrt((1 + h) / (1 + h_cal)), "
    "h = 1/n + T^2/(n - 1) the sample's leverage, h_cal = (1 + a)/n the mean calibration "
    "leverage; includes the reference-value error as it shows in RMSECV, assumes the sample "
    "resembles the calibration mixtures"
)
def check_model(model: Any, name: str = "model") -> xr.Dataset:
    """Check that ``model`` is a mixsolve PLS model Dataset and return it.

    Parameters
    ----------
    model : object
        Expected: a Dataset from :func:`mixsolve.calibrate` or :func:`mixsolve.read_model`.
    name : str
        What to call it in messages (a file name, say).

    Raises
    ------
    InputError
        Not a Dataset with ``mixsolve_kind`` :data:`MODEL_KIND`, or a format newer than
        :data:`FORMAT_VERSION`.
    """
    if not isinstance(model, xr.Dataset) or model.attrs.get("mixsolve_kind") != MODEL_KIND:
        raise InputError(f"{name}: not a mixsolve PLS model (make one with mixsolve.calibrate "
                         "or `mixsolve calibrate`)")
    if int(model.attrs.get("format_version", 0)) > FORMAT_VERSION:
        raise InputError(f"{name}: model format {model.attrs['format_version']} is newer than "
                         f"this mixsolve reads ({FORMAT_VERSION}); update mixsolve")
    return model
