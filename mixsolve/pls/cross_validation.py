"""Cross-validation of PLS models and the choice of the number of latent variables.

Folds are contiguous blocks or seeded shuffles (scikit-learn's ``KFold``), or, when the
samples are grouped, whole groups (scikit-learn's ``GroupKFold``); the number of latent
variables follows the one-standard-error rule (docs/calibration.md).
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any, Literal, NamedTuple

import numpy as np
from sklearn.model_selection import GroupKFold, KFold

from mixsolve.errors import InputError
from mixsolve.pls.blocks import block_groups, fit_block, project
from mixsolve.pls.preprocessing import centre_scale
from mixsolve.spectra import check_number

Split = Literal["blocks", "random"]
SPLITS: tuple[str, ...] = ("blocks", "random")
#: Most latent variables tried by default.
DEFAULT_MAX_LATENT = 15
#: Folds by default (fewer when there are fewer samples).
DEFAULT_FOLDS = 10
#: The rule, as recorded in the model's ``cross_validation`` attribute.
ONE_SE_RULE = (
    "fewest latent variables whose cross-validated error is within one standard error of the "
    "minimum; error = mean over samples (and components) of (prediction - reference)^2 / "
    "variance of the reference, standard error = sd over folds / sqrt(folds)"
)


def make_folds(n_samples: int, folds: int, split: str, seed: int,
               groups: np.ndarray | None = None) -> np.ndarray:
    """Fold index (0-based) of each sample: contiguous blocks in order, or shuffled.

    Parameters
    ----------
    n_samples, folds : int
        Number of calibration samples and of folds (2 ≤ folds ≤ n_samples).
    split : {"blocks", "random"}
        Contiguous blocks in sample order, or a shuffle seeded with ``seed``.
    seed : int
        Seed of the shuffle (ignored for blocks).
    groups : array, shape (n_samples,), optional
        Group label of each sample; a group is never split between folds
        (2 ≤ folds ≤ number of groups).

    Returns
    -------
    array of int, shape (n_samples,)

    Notes
    -----
    ``sklearn.model_selection.KFold``: fold sizes differ by at most one, the larger first.
    With groups, ``sklearn.model_selection.GroupKFold``: ``blocks`` puts the largest groups
    first, each into the fold with the fewest samples so far (folds of nearly equal size,
    deterministic); ``random`` shuffles the groups with ``seed`` first
    (``shuffle=True``). As many folds as groups is leave-one-group-out.
    """
    if groups is not None:
        shuffled = split == "random"
        splitter = GroupKFold(n_splits=folds, shuffle=shuffled,
                              random_state=seed if shuffled else None)
        index = np.empty(n_samples, dtype=np.int64)
        for f, (_, test) in enumerate(splitter.split(np.zeros(n_samples),
                                                     groups=np.asarray(groups))):
            index[test] = f
        return index
    kfold = KFold(n_splits=folds, shuffle=split == "random",
                  random_state=seed if split == "random" else None)
    index = np.empty(n_samples, dtype=np.int64)
    for f, (_, test) in enumerate(kfold.split(np.zeros(n_samples))):
        index[test] = f
    return index


def check_counts(n: int, folds: int | None, max_latent: int,
                 n_groups: int | None = None) -> int:
    """Check the number of samples, folds and latent variables; return the folds to use.

    Parameters
    ----------
    n : int
        Number of calibration samples.
    folds : int or None
        Folds asked for; None gives min(:data:`DEFAULT_FOLDS`, n), or
        min(:data:`DEFAULT_FOLDS`, groups) when the samples are grouped.
    max_latent : int
        Most latent variables to try.
    n_groups : int, optional
        Number of groups of samples, when grouped.

    Raises
    ------
    InputError
        Fewer than 3 samples (or 2 groups), folds outside 2..n (2..groups), or
        ``max_latent`` below 1.
    """
    if n < 3:
        raise InputError(f"calibration: {n} sample(s); cross-validation needs at least 3 "
                         "calibration mixtures (use many more in practice)")
    if n_groups is not None and n_groups < 2:
        raise InputError(f"reference: all {n} samples are in one group; cross-validation "
                         "needs at least 2 groups (folds never split a group)")
    most = n if n_groups is None else n_groups
    k = min(DEFAULT_FOLDS, most) if folds is None else int(check_number(
        folds, "folds", low=2, high=most, integer=True,
        hint=f"at most one fold per calibration sample ({n})" if n_groups is None else
        f"at most one fold per group of samples ({n_groups} groups; a group is never split)"))
    check_number(max_latent, "max_latent", low=1, integer=True)
    return k


def latent_bound(x: np.ndarray, fold: np.ndarray, max_latent: int) -> int:
    """Largest usable number of latent variables: at most the rank of every training set.

    Parameters
    ----------
    x : array, shape (n_samples, n_wavelengths)
        Preprocessed spectra.
    fold : array of int, shape (n_samples,)
    max_latent : int
        Most latent variables asked for.

    Returns
    -------
    int
        min(max_latent, n_wavelengths, rank of each centred training set and of the whole).

    Raises
    ------
    InputError
        The spectra do not vary (rank 0).
    """
    bound = min(int(max_latent), x.shape[1])
    for f in np.unique(fold):
        train = x[fold != f]
        bound = min(bound, int(np.linalg.matrix_rank(train - train.mean(axis=0))))
    bound = min(bound, int(np.linalg.matrix_rank(x - x.mean(axis=0))))
    if bound < 1:
        raise InputError("calibration: the spectra do not vary between the training samples "
                         "(rank 0); nothing to calibrate")
    return bound


def cv_predictions(x: np.ndarray, y: np.ndarray, fold: np.ndarray, a_max: int, scale: str,
                   mode: str) -> np.ndarray:
    """Cross-validated predictions for 1..a_max latent variables.

    Parameters
    ----------
    x : array, shape (n_samples, n_wavelengths)
        Preprocessed spectra (AU, or AU/nm after a derivative), not centred.
    y : array, shape (n_samples, n_components)
        Reference concentrations (model unit).
    fold : array of int, shape (n_samples,)
    a_max : int
        Most latent variables.
    scale : {"none", "autoscale"}
    mode : {"pls2", "pls1"}

    Returns
    -------
    array, shape (a_max, n_samples, n_components)
        Prediction of each sample by the model fitted without its fold (model unit).

    Notes
    -----
    Centring and scaling are recomputed on each training set. One NIPALS fit with
    ``a_max`` latent variables per fold and block; the prediction with a latent variables
    uses its first a (NIPALS components are sequential, so this equals a fit with a
    components; tested).
    """
    pred = np.empty((a_max, *y.shape))
    for split in _splits(x, y, fold, scale):
        for cols in block_groups(y.shape[1], mode):
            block = fit_block(split.xs_train, split.ys_train[:, cols], a_max)
            scores = split.xs_test @ block["rotations"]  # (n_test, a_max)
            parts = scores[:, :, None] * block["y_loadings"].T[None, :, :]
            ys_hat = np.cumsum(parts, axis=1)  # (n_test, a_max, n_cols)
            pred[:, np.flatnonzero(split.test)[:, None], cols] = (
                np.moveaxis(ys_hat, 1, 0) * split.y_scale[cols] + split.y_mean[cols])
    return pred


def cv_x_residuals(x: np.ndarray, y: np.ndarray, fold: np.ndarray, scale: str,
                   cols: list[int], n_latent: int) -> np.ndarray:
    """Spectral residual of each mixture under the block fitted without its fold.

    Parameters
    ----------
    x, y, fold, scale
        As for :func:`cv_predictions`.
    cols : list of int
        The components of the block.
    n_latent : int
        The block's number of latent variables.

    Returns
    -------
    array, shape (n_samples, n_wavelengths)
        e = x − t Pᵀ of each left-out spectrum, centred and scaled with its training set
        (preprocessed, scaled units): what the residual of a new sample looks like, and
        so the basis of the Q limit (:func:`mixsolve.pls.limits.q_limit`).
    """
    return cv_block_statistics(x, y, fold, scale, cols, n_latent)[1]


def cv_block_statistics(x: np.ndarray, y: np.ndarray, fold: np.ndarray, scale: str,
                        cols: list[int], n_latent: int) -> tuple[np.ndarray, np.ndarray]:
    """Hotelling T² and spectral residual of each mixture under the block fitted without it.

    Parameters
    ----------
    x, y, fold, scale, cols, n_latent
        As for :func:`cv_x_residuals`.

    Returns
    -------
    t2 : array, shape (n_samples,)
        T² = Σₐ tₐ²/s²ₐ of each left-out spectrum, t = x R of the block fitted on the other
        folds and s²ₐ the variance (ddof 1) of that block's training scores: the T² a new
        sample gets, and so the basis of the T² limit
        (:func:`mixsolve.pls.limits.cv_limit`). Dimensionless.
    residual : array, shape (n_samples, n_wavelengths)
        As returned by :func:`cv_x_residuals`.
    """
    t2 = np.empty(x.shape[0])
    residual = np.empty_like(x)
    for split in _splits(x, y, fold, scale):
        block = fit_block(split.xs_train, split.ys_train[:, cols], n_latent)
        var = (split.xs_train @ block["rotations"]).var(axis=0, ddof=1)
        _, t2[split.test], residual[split.test], _ = project(
            split.xs_test, block["rotations"], block["loadings"], var)
    return t2, residual


class _Split(NamedTuple):
    """One fold's training data, centred and scaled with the training set's statistics."""

    test: np.ndarray
    xs_train: np.ndarray
    xs_test: np.ndarray
    ys_train: np.ndarray
    y_mean: np.ndarray
    y_scale: np.ndarray


def _splits(x: np.ndarray, y: np.ndarray, fold: np.ndarray, scale: str) -> Iterator[_Split]:
    """For each fold: X centred (and scaled), Y centred and divided by its sd, on the rest."""
    for f in np.unique(fold):
        test, train = fold == f, fold != f
        mx, sx = centre_scale(x[train], scale)
        my, sy = y[train].mean(axis=0), y[train].std(axis=0, ddof=1)
        sy = np.where(sy > 0, sy, 1.0)
        yield _Split(test, (x[train] - mx) / sx, (x[test] - mx) / sx, (y[train] - my) / sy,
                     my, sy)


def cv_criterion(pred: np.ndarray, y: np.ndarray, fold: np.ndarray, cols: list[int]
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Pooled CV error (variance-scaled) and its standard error over folds, per candidate.

    Parameters
    ----------
    pred : array, shape (a_max, n_samples, n_components)
        From :func:`cv_predictions`.
    y : array, shape (n_samples, n_components)
    fold : array of int, shape (n_samples,)
    cols : list of int
        The components of one block.

    Returns
    -------
    criterion, standard_error : array, shape (a_max,)
        e(a) = mean over samples and ``cols`` of (ŷ − y)²/var(y) (dimensionless) and
        SE(a) = sd over folds of the per-fold means / √folds.
    """
    var = y[:, cols].var(axis=0, ddof=1)
    sq = ((pred[:, :, cols] - y[None, :, cols]) ** 2 / var).mean(axis=2)  # (a_max, n)
    per_fold = np.stack([sq[:, fold == f].mean(axis=1) for f in np.unique(fold)], axis=1)
    k = per_fold.shape[1]
    return sq.mean(axis=1), per_fold.std(axis=1, ddof=1) / np.sqrt(k)


def one_standard_error_choice(criterion: np.ndarray, standard_error: np.ndarray) -> int:
    """Fewest latent variables within one standard error of the minimum.

    Parameters
    ----------
    criterion, standard_error : array, shape (n_candidates,)
        Cross-validated error for 1, 2, ... latent variables and its standard error.

    Returns
    -------
    int
        The chosen number of latent variables (1-based).
    """
    best = int(np.nanargmin(criterion))
    threshold = criterion[best] + (standard_error[best] if np.isfinite(standard_error[best])
                                   else 0.0)
    return int(np.flatnonzero(criterion <= threshold)[0]) + 1


def cross_validate(x: np.ndarray, y: np.ndarray, fold: np.ndarray, a_max: int, scale: str,
                   latent: int | str) -> dict[str, dict[str, Any]]:
    """Cross-validate both modes and choose the latent variables of each block.

    Parameters
    ----------
    x, y, fold, a_max, scale
        As for :func:`cv_predictions`.
    latent : int or "auto"
        A fixed number, or ``auto`` for :func:`one_standard_error_choice` per block.

    Returns
    -------
    dict
        For ``"pls2"`` and ``"pls1"``: ``pred`` (a_max, n, n_components), ``criterion``
        and ``se`` (n_components, a_max), ``choice`` (n_components,) and ``total``, the
        mean over components of the criterion at the choice (what ``mode="auto"``
        compares). With one component both keys hold the same entry.
    """
    out: dict[str, dict[str, Any]] = {}
    n_y = y.shape[1]
    for mode in ("pls2", "pls1"):
        pred = cv_predictions(x, y, fold, a_max, scale, mode)
        crit = np.empty((n_y, a_max))
        se = np.empty((n_y, a_max))
        choice = np.empty(n_y, dtype=np.int64)
        for cols in block_groups(n_y, mode):
            c, s = cv_criterion(pred, y, fold, cols)
            a = one_standard_error_choice(c, s) if latent == "auto" else int(latent)
            crit[cols], se[cols], choice[cols] = c, s, a
        per_comp = np.array([crit[k, choice[k] - 1] for k in range(n_y)])
        out[mode] = {"pred": pred, "criterion": crit, "se": se, "choice": choice,
                     "total": float(per_comp.mean())}
        if n_y == 1:
            out["pls1"] = out["pls2"]
            break
    return out


def rms_error(pred: np.ndarray, y: np.ndarray) -> np.ndarray:
    """√(mean over samples of (pred − y)²), samples on the second-last axis (unit of y)."""
    return np.sqrt(np.mean((pred - y) ** 2, axis=-2))
