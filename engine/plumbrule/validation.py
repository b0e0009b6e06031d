"""Validation: a holdout the model never sees, k-fold cross-validation, and their error figures.

* Holdout: a seeded random share of the clean rows (NumPy ``default_rng(seed)``,
  PCG64, one ``permutation`` of the rows in sheet order: the same seed and the
  same rows give the same split on every platform), or the most recent sales
  by the date column (``holdout_recent``).
* A holdout row whose category level does not occur among the training rows
  cannot be estimated; it is moved to the training rows and the move is
  reported in the checks table (an error would make a random split fail for
  a reason the user did not choose).
* k-fold: seeded fold labels on the training rows; each fold's coefficients
  come from the other folds by combining per-fold triangular QR factors (one
  pass over the data, never X'X), so cross-validation costs about one fit.
* Log-price models are judged on the price scale: estimate = exp(prediction) ×
  a retransformation factor (Duan's smearing factor by default).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from plumbrule.errors import SettingError
from plumbrule.settings import Settings
from plumbrule.intake.keys import stable_uniform
from plumbrule.model.retransform import price_estimates, retransform_factor
from plumbrule.numeric.vectors import dot

DEFAULT_HOLDOUT = 0.30
VALIDATION_COLUMNS = ["set", "n", "r_squared", "rmse", "mae", "mape", "r_squared_model",
                      "rmse_model", "note"]


@dataclass(frozen=True)
class Split:
    """Sheet rows of the training and holdout sets; ``method`` none, random or recent."""

    training: pd.Index
    holdout: pd.Index
    method: str


# --- the holdout -------------------------------------------------------------

def holdout_share(settings: Settings) -> float:
    """The holdout share asked for: ``holdout``, or 0.30 when only ``holdout_recent`` is on."""
    if settings.holdout is not None:
        return float(settings.holdout)
    return DEFAULT_HOLDOUT if settings.holdout_recent else 0.0


def holdout_count(n: int, share: float) -> int:
    """Rows held out: share × n rounded half up, at least 1 when a share is asked for."""
    if share <= 0 or n == 0:
        return 0
    return max(1, int(np.floor(share * n + 0.5)))


def random_holdout(keys: np.ndarray, share: float, seed: int) -> np.ndarray:
    """Boolean mask over the sales whose 64-bit ``keys`` are given (:func:`intake.keys.
    sale_hashes`): a sale is held out when its own seeded draw falls below ``share``, so
    adding, deleting or sorting other sales never moves it between training and holdout.
    The holdout is about ``share`` of the sales (binomial), at least one when asked for."""
    if share <= 0 or len(keys) == 0:
        return np.zeros(len(keys), dtype=bool)
    u = stable_uniform(keys, seed, stream=0)
    mask = u < share
    if not mask.any():
        mask[np.argmin(u)] = True
    return mask


def recent_holdout(dates: pd.Series, share: float) -> np.ndarray:
    """Boolean mask: the latest ``share`` of sales by date (ties broken by sheet row)."""
    n = len(dates)
    k = holdout_count(n, share)
    mask = np.zeros(n, dtype=bool)
    if k:
        key = pd.DataFrame({"d": pd.to_datetime(dates).to_numpy(), "r": dates.index.to_numpy()})
        order = key.sort_values(["d", "r"], kind="stable").index.to_numpy()
        mask[order[n - k:]] = True
    return mask


def split_rows(data: pd.DataFrame, share: float, recent: bool, seed: int,
               date_column: str | None, keys: np.ndarray) -> Split:
    """Split the clean rows into training and holdout: ``share`` held out, the most
    recent by ``date_column`` when ``recent``, else each sale by its own seeded draw
    (``keys``: the rows' sale keys, same order as ``data``)."""
    if share <= 0:
        return Split(data.index, data.index[:0], "none")
    if recent:
        if not date_column:
            raise SettingError("Setting 'holdout_recent' needs a sale-date column. Set "
                               "'date_column' or use a random holdout.", setting="holdout_recent")
        mask = recent_holdout(data[date_column], share)
        method = "recent"
    else:
        mask = random_holdout(keys, share, seed)
        method = "random"
    return Split(data.index[~mask], data.index[mask], method)


def unseen_level_rows(training: pd.DataFrame, holdout: pd.DataFrame,
                      categorical) -> pd.DataFrame:
    """Holdout rows with a category level absent from ``training``: row, column, level."""
    recs = []
    for col in categorical:
        bad = ~holdout[col].isin(training[col].unique())
        if bad.any():
            recs.append(pd.DataFrame({"row": holdout.index[bad].to_numpy(np.int64),
                                      "column": col, "level": holdout.loc[bad, col].to_numpy()}))
    if not recs:
        return pd.DataFrame({"row": pd.Series(dtype=np.int64), "column": pd.Series(dtype=object),
                             "level": pd.Series(dtype=object)})
    return pd.concat(recs, ignore_index=True).drop_duplicates("row")


# --- estimates -----------------------------------------------------------------

def predict(model, data: pd.DataFrame, label: str = "holdout row") -> np.ndarray:
    """Model-scale predictions (log price for log models) for clean rows ``data``."""
    return model.predict(model.encoding.design(data, label))


# --- error figures ---------------------------------------------------------------

def error_figures(price: np.ndarray, estimate: np.ndarray, y: np.ndarray,
                  pred: np.ndarray) -> dict:
    """R², RMSE, MAE, MAPE (percent) on the price scale, and R² and RMSE on the model scale.

    R² is 1 − Σ(price − estimate)² / Σ(price − mean price) over the same rows
    (for a holdout, the holdout's own mean: an out-of-sample R², may be negative).
    """
    n = len(price)
    if n == 0:
        return {"n": 0, "r_squared": np.nan, "rmse": np.nan, "mae": np.nan, "mape": np.nan,
                "r_squared_model": np.nan, "rmse_model": np.nan}
    e = price - estimate
    work = np.empty_like(e)               # one scratch array for the n-row steps
    with np.errstate(divide="ignore", invalid="ignore"):
        np.divide(e, price, out=work)
    np.abs(work, out=work)
    mape = 100.0 * float(np.mean(work)) if np.isfinite(work).all() else np.nan
    r2, rmse = _r2(price, e, work), _rms(e, work)
    np.abs(e, out=work)
    mae = float(np.mean(work))
    if y is price and pred is estimate:   # a price-scale model: the same figures, computed once
        r2_model, rmse_model = r2, rmse
    else:
        em = y - pred
        r2_model, rmse_model = _r2(y, em, work), _rms(em, work)
    return {"n": n, "r_squared": r2, "rmse": rmse, "mae": mae, "mape": mape,
            "r_squared_model": r2_model, "rmse_model": rmse_model}


def _rms(e: np.ndarray, work: np.ndarray) -> float:
    np.multiply(e, e, out=work)
    return float(np.sqrt(np.mean(work)))


def _r2(y: np.ndarray, e: np.ndarray, work: np.ndarray | None = None) -> float:
    work = np.empty_like(y) if work is None else work
    np.subtract(y, y.mean(), out=work)
    work *= work
    tss = float(np.sum(work))
    return 1.0 - dot(e, e) / tss if tss > 0 else np.nan


# --- k-fold --------------------------------------------------------------------------

def fold_labels(keys: np.ndarray, folds: int, seed: int) -> np.ndarray:
    """Fold number (0..folds−1) of each sale from its own seeded draw (a stream apart from
    the holdout's), so another sale's arrival never moves it to another fold. Fold sizes
    are about equal (multinomial); should a fold come out empty (a handful of sales), the
    sales are dealt round-robin in the order of their draws instead."""
    u = stable_uniform(keys, seed, stream=1)
    labels = np.minimum((u * folds).astype(np.int64), folds - 1)
    if len(keys) >= folds and np.bincount(labels, minlength=folds).min() == 0:
        labels = np.empty(len(keys), dtype=np.int64)
        labels[np.argsort(u, kind="stable")] = np.arange(len(keys)) % folds
    return labels


@dataclass(frozen=True)
class CrossValidation:
    """Per-fold error figures and the out-of-fold estimates (NaN where a row could not be
    estimated because its category level is absent from the other folds)."""

    folds: pd.DataFrame          # VALIDATION_COLUMNS, one record per fold
    labels: np.ndarray
    pred: np.ndarray             # model scale
    estimate: np.ndarray         # price scale


def cross_validate(model, folds: int, seed: int, retransform: str = "smearing",
                   keys: np.ndarray | None = None) -> CrossValidation:
    """k-fold cross-validation of ``model``'s specification on its own (training) rows."""
    n = model.fit.n
    if folds < 2 or folds > n:
        raise SettingError(f"Setting 'folds': {folds} folds cannot cross-validate {n} sales. "
                           "Use 0 (off) or a number from 2 to the number of sales.",
                           setting="folds")
    if keys is None:   # no sale keys given: the rows' content in the model's own columns
        keys = pd.util.hash_pandas_object(model.data.reset_index(drop=True), index=False
                                          ).to_numpy(np.uint64)
    labels = fold_labels(keys, folds, seed)
    # each fold a contiguous block (a stable sort of small integers: numpy's radix sort)
    order = np.argsort(labels.astype(np.int16 if folds < 2**15 else np.int64), kind="stable")
    bounds = np.searchsorted(labels[order], np.arange(folds + 1))
    # [1 | scaled x | y], rows by fold, column-major; each fold's range of every column
    zy, lo_hi = _working_design(model, order, bounds)
    informed = _informed_columns(*lo_hi, model.fit.has_intercept)
    z, y = zy[:, :-1], zy[:, -1]
    # LAPACK works on columns: a block handed over column-major is factored faster
    blocks = [(np.linalg.qr(np.asfortranarray(zy[lo:hi]), mode="r"), hi - lo)
              for lo, hi in zip(bounds[:-1], bounds[1:], strict=False)]
    price = model.data[model.spec.response].to_numpy(float)[order]
    log = model.spec.log_response
    pred, est = np.full(n, np.nan), np.full(n, np.nan)
    recs = []
    for f, (lo, hi) in enumerate(zip(bounds[:-1], bounds[1:], strict=False)):
        keep_x, constant = informed(f)                # predictor columns the other folds inform
        keep = np.concatenate([[True], keep_x]) if model.fit.has_intercept else keep_x
        theta, df = _combine([b for g, b in enumerate(blocks) if g != f], keep)
        if theta is None:
            recs.append({"set": f"fold {f + 1}", **error_figures(price[:0], price[:0], y[:0],
                                                               y[:0]),
                         "note": "the other folds cannot determine every effect"})
            continue
        factor = 1.0
        every = bool(keep.all())
        zk = z if every else np.asfortranarray(z[:, keep])
        if log:   # the retransformation factor of the fit on the other folds
            e = y - zk @ theta
            factor = retransform_factor(np.concatenate([e[:lo], e[hi:]]), retransform, df)
        # A dropped column is constant on the other folds (an indicator that is 0 there):
        # the fit absorbs it into the intercept, which is right only for rows at that value.
        if keep_x.all():
            p = zk[lo:hi] @ theta
            idx = np.arange(lo, hi)
        else:
            rows = model.x[order[lo:hi]]
            usable = np.all(rows[:, ~keep_x] == constant[~keep_x], axis=1)
            p = np.asfortranarray(zk[lo:hi][usable]) @ theta
            idx = np.arange(lo, hi)[usable]
        skipped = hi - lo - len(idx)
        pred[idx] = p
        est[idx] = price_estimates(p, log, factor)
        note = (f"{skipped} sales not estimated: their category level is only in this fold"
                if skipped else "")
        recs.append({"set": f"fold {f + 1}",
                     **error_figures(price[idx], est[idx], y[idx], p), "note": note})
    back = np.empty(n, dtype=np.int64)
    back[order] = np.arange(n)                                 # sorted position of each row
    table = pd.DataFrame(recs).reindex(columns=VALIDATION_COLUMNS)
    return CrossValidation(folds=table, labels=labels, pred=pred[back], estimate=est[back])


def _informed_columns(lo: np.ndarray, hi: np.ndarray, intercept: bool):
    """From each fold's least and greatest value of every column (folds × columns, user
    units): a function of fold f giving (keep, value). keep marks the columns that vary over
    the other folds' rows (with an intercept) or are non-zero somewhere on them (without
    one); for the other columns, ``value`` is the one value they take there (0 without an
    intercept).

    Judged on the raw columns, not the centred working ones: centred, an indicator that is
    0 on the other folds becomes the constant −mean there, which is non-zero yet carries
    nothing the intercept does not."""
    folds = np.arange(len(lo))

    def informed(f: int) -> tuple[np.ndarray, np.ndarray]:
        rest = folds != f
        low, high = lo[rest].min(axis=0), hi[rest].max(axis=0)
        if intercept:
            return low < high, low
        return (low != 0) | (high != 0), np.zeros(lo.shape[1])
    return informed


def _working_design(model, order: np.ndarray, bounds: np.ndarray | None = None
                    ) -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray]]:
    """[1 | (x − mean)/norm | y] with rows in ``order``, column-major (Fortran order, as
    LAPACK and the products with it want; no constant column without an intercept), and
    each fold's least and greatest raw value of every column (two folds × columns arrays;
    no rows without fold ``bounds`` into ``order``).

    Centring and unit-length columns keep the fold QR factors well conditioned. Each
    column is gathered straight into its contiguous place and worked on there: the same
    sums in the same order as on a copy, and no second copy of the design.
    """
    x, n = model.x, len(order)
    icpt = int(model.fit.has_intercept)
    k = x.shape[1]
    zy = np.empty((n, icpt + k + 1), order="F")
    if icpt:
        zy[:, 0] = 1.0
    cuts = [] if bounds is None else list(zip(bounds[:-1], bounds[1:], strict=False))
    lo, hi = np.empty((len(cuts), k)), np.empty((len(cuts), k))
    for j in range(k):
        col = zy[:, icpt + j]
        np.take(x[:, j], order, out=col)
        for f, (a, b) in enumerate(cuts):
            lo[f, j], hi[f, j] = col[a:b].min(), col[a:b].max()
        if icpt:
            col -= col.mean()
        norm = np.sqrt(dot(col, col))
        if norm > 0:
            col /= norm
    zy[:, -1] = model.y[order]
    return zy, (lo, hi)


def _combine(blocks, keep: np.ndarray):
    """Coefficients (working scale) from stacked fold factors over the ``keep`` columns,
    and the residual degrees of freedom; (None, 0) when the columns are not of full rank."""
    k = int(keep.sum())
    cols = np.concatenate([keep, [True]])
    stacked = np.vstack([r[:, cols] for r, _ in blocks])
    n = sum(m for _, m in blocks)
    r = np.asarray(np.linalg.qr(stacked, mode="r"))
    diag = np.abs(np.diag(r)[:k])
    if n <= k or diag.min(initial=np.inf) <= 1e-10 * max(diag.max(initial=0.0), 1.0):
        return None, 0
    from scipy.linalg import solve_triangular
    theta = solve_triangular(r[:k, :k], r[:k, k])
    return theta, n - k


def summarise_folds(folds: pd.DataFrame) -> pd.DataFrame:
    """'folds mean' and 'folds sd' (sample sd, n − 1) of each figure across the folds."""
    figs = ["r_squared", "rmse", "mae", "mape", "r_squared_model", "rmse_model"]
    mean = {"set": "folds mean", "n": int(folds["n"].sum()), **folds[figs].mean().to_dict(),
            "note": f"mean over {len(folds)} folds"}
    sd = {"set": "folds sd", "n": int(folds["n"].sum()), **folds[figs].std(ddof=1).to_dict(),
          "note": "spread between folds (standard deviation)"}
    return pd.DataFrame([mean, sd]).reindex(columns=VALIDATION_COLUMNS)


def validation_table(model, retransform: str, holdout: pd.DataFrame | None = None,
                     holdout_pred: np.ndarray | None = None,
                     holdout_estimate: np.ndarray | None = None,
                     cv: CrossValidation | None = None) -> pd.DataFrame:
    """validation: training (in-sample), holdout, then each fold with the mean and spread."""
    spec = model.spec
    price = model.data[spec.response].to_numpy(float)
    fitted = model.fit.fitted
    est = price_estimates(fitted, spec.log_response, model.retransform_factor(retransform))
    y = model.y if spec.log_response else price        # equal arrays on the price scale
    recs = [{"set": "training", **error_figures(price, est, y, fitted),
             "note": "in-sample: the training rows the validated model was fitted on"}]
    if holdout is not None and len(holdout) and holdout_estimate is not None \
            and holdout_pred is not None:
        hp = holdout[spec.response].to_numpy(float)
        hy = model.encoding.response(holdout)
        recs.append({"set": "holdout", **error_figures(hp, holdout_estimate, hy, holdout_pred),
                     "note": "out-of-sample: sales the model never saw"})
    table = pd.DataFrame(recs).reindex(columns=VALIDATION_COLUMNS)
    if cv is not None:
        table = pd.concat([table, cv.folds, summarise_folds(cv.folds)], ignore_index=True)
    table["n"] = table["n"].astype(np.int64)
    return table
