"""Local projections (Jorda 2005, AER 95(1)): one least-squares regression per horizon, and
impulse responses with bands that survive the overlap of their errors.

For h = 0..H the horizon-h regression is

    y_{t+h}  (or y_{t+h} - y_{t-1} with `cumulative`)
        = a_h + beta_h shock_t + sum_{l=1..p} (c_hl shock_{t-l} + d_hl y_{t-l} + e_hl' w_{t-l}) + u_{t+h}

with the controls w entering by their lags only. The shock is ordered first: no contemporaneous
value of the response or of a control enters, so beta_h is the response to the part of shock_t
not predicted by the lags (a recursive, "shock first" identification).

Each horizon is an ordinary `fit_ols` on shifted columns (`lp.horizon(h)`), so every time-series
estimator family, tool and chart applies to it unchanged. The joint covariance of the estimates
across horizons comes from `lagwise.stack` of the horizons' fits (`lp.stacked`): their moment
contributions side by side on the union of their time indexes, zero where a horizon has no
observation, with the block-diagonal influence map. How the samples differ and how that is
handled:

* the first `start` rows feed the lags (start = p, or max(p, 1) with `cumulative`, which needs
  y_{t-1}); horizon h loses the last h rows (they have no y_{t+h}), so it uses t = start..T-1-h,
  n_h = T - start - h observations (`common_sample=True`: t = start..T-1-H at every horizon,
  statsmodels' LocalProjections convention);
* the joined index is the longest sample (h = 0); a horizon's contributions are zero on the rows
  it lacks. Each horizon's rows are consecutive in it, so a sum of products of the
  contributions over the joined rows (HC0, any kernel at a fixed bandwidth) gives each horizon's
  own variance on the diagonal exactly, with no rescaling (each contribution already carries its
  own (X_h'X_h)^-1), and the covariance of two horizons from the rows and pairs of rows both
  have. Where a tuning value would differ by horizon (a horizon rule, an automatic bandwidth,
  EWC's B), the bands keep each horizon's own variance and take only the correlations from the
  joined series (see `engine.models.lp_inference`).

Data: a regular time index. Dates that skip periods, repeated or unsorted dates, and a missing
value inside the sample are refused (a lead or a lag would join periods that are not adjacent);
leading and trailing rows with a missing value are dropped and said so. A non-date index is
taken as consecutive periods.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from ..blas import one_blas_thread
from ..caches import Caches, nbytes_of
from ..data.columns import frame_and_meta, index_label
from ..errors import DataError, LagwiseError, SpecificationError
from .lp_inference import (Bands, JointCovariance, LPSweep, as_lp_estimator, bootstrap_bands,
                           cumulative_table, default_estimators, irf_table, joint_covariance,
                           multiplier_table, pointwise_bands, significance_table, sweep_horizons)
from .ols import fit_ols
from .series import SeriesModel
from .stacked import stack


def _error(cls, message: str, *, column=None, horizon=None, H=None, T=None):
    """A typed engine error carrying what it is about (column, horizon, H, T) as attributes."""
    exc = cls(message)
    exc.column, exc.horizon, exc.H, exc.T = column, horizon, H, T
    return exc


def _whole(value) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_))


def _infer_freq(index):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            freq = pd.infer_freq(index)
        except (TypeError, ValueError):
            return None
    return None if freq is None else pd.tseries.frequencies.to_offset(freq)


def _regular_frequency(index: pd.DatetimeIndex):
    """The index's frequency: its own, the inferred one, or one inferred from a run of five
    consecutive dates (so that an index with a gap still reveals its frequency)."""
    if index.freq is not None:
        return index.freq
    if len(index) >= 3:
        freq = _infer_freq(index)
        if freq is not None:
            return freq
        for s in range(0, max(len(index) - 4, 0)):
            freq = _infer_freq(index[s: s + 5])
            if freq is not None:
                return freq
    return None


def check_dates(index: pd.Index) -> list[str]:
    """Refuse repeated, unsorted, irregular or gapped dates (naming the first missing period);
    a non-date index is taken as consecutive periods."""
    if not isinstance(index, pd.DatetimeIndex):
        return ["the rows are taken as consecutive periods (the index holds no dates)"]
    if index.has_duplicates:
        dup = index[index.duplicated()][0]
        raise _error(DataError, f"date {dup.date()} appears twice; local projections need one "
                     "row per period")
    if not index.is_monotonic_increasing:
        raise _error(DataError, "the dates are not in increasing order; sort the data by date")
    freq = _regular_frequency(index)
    if freq is None:
        raise _error(DataError, "the dates have no regular frequency (daily, monthly, "
                     "quarterly...); local projections shift rows by whole periods")
    full = pd.date_range(index[0], index[-1], freq=freq)
    if len(full) != len(index) or not full.equals(index):
        missing = full.difference(index)
        if len(missing) == 0:
            raise _error(DataError, f"the dates do not follow their frequency {freq.freqstr}")
        raise _error(DataError, f"the dates have gaps: {len(missing)} period(s) of frequency "
                     f"{freq.freqstr} missing, the first {missing[0].date()}; a lead or lag "
                     "would join periods that are not adjacent. Fill the missing periods or "
                     "use a stretch of data without gaps")
    return [f"dates regular at frequency {freq.freqstr}"]


def response_name(response: str, h: int, cumulative: bool) -> str:
    """The name of the horizon-h response column: 'y' (h = 0), 'y, lead h', or with
    `cumulative` 'y, lead h less lag 1' (y_{t+h} - y_{t-1})."""
    base = response if h == 0 else f"{response}, lead {h}"
    return f"{base} less lag 1" if cumulative else base


def _prepare(data, response, shock, controls, lags, horizons, cumulative, time, common_sample):
    """Validate the inputs; (trimmed frame of [shock, response, controls], notes, start)."""
    table, frame, non_numeric, _ = frame_and_meta(data)
    if isinstance(controls, str):
        controls = [controls] if controls else []
    controls = list(controls or [])
    if not _whole(lags) or lags < 0:
        raise _error(SpecificationError, f"lags must be a whole number >= 0, got {lags!r}")
    if not _whole(horizons) or horizons < 0:
        raise _error(SpecificationError, f"horizons must be a whole number >= 0, got "
                     f"{horizons!r}", H=horizons)
    lags, horizons = int(lags), int(horizons)
    if time is not None and time == frame.index.name:
        time = None                       # the dates are the index already (load_table)
    if time is not None:
        if not isinstance(time, str) or time not in frame.columns and (
                table is None or table.labels is None or time not in table.labels.columns):
            raise _error(SpecificationError, f"no column named {time!r} for the dates",
                         column=time)
        raw = frame[time] if time in frame.columns else table.labels[time]
        try:
            dates = pd.DatetimeIndex(pd.to_datetime(raw))
        except (TypeError, ValueError) as exc:
            raise _error(DataError, f"column {time!r} does not hold dates: {exc}",
                         column=time) from None
        frame = frame.set_axis(dates, axis=0)
    roles = [("response", response), ("shock", shock)] + [("control", c) for c in controls]
    for role, col in roles:
        if not isinstance(col, str) or not col or col not in frame.columns:
            raise _error(SpecificationError, f"no {role} column named {col!r}", column=col)
        if col in non_numeric or not pd.api.types.is_numeric_dtype(frame[col]) \
                or pd.api.types.is_bool_dtype(frame[col]):
            raise _error(DataError, f"column {col!r} is not numeric", column=col)
    if response == shock:
        raise _error(SpecificationError, f"{response!r} is both the response and the shock; "
                     "at h = 0 the regression would explain the shock by itself",
                     column=response)
    if response in controls:
        raise _error(SpecificationError, f"{response!r} is the response and also a control: "
                     "its lags are controls already, and its current value cannot be one (the "
                     "shock is ordered first)", column=response)
    if shock in controls:
        raise _error(SpecificationError, f"{shock!r} is the shock and also a control: its lags "
                     "are controls already", column=shock)
    dup = [c for c in controls if controls.count(c) > 1]
    if dup:
        raise _error(SpecificationError, f"control {dup[0]!r} is listed twice", column=dup[0])
    cols = [shock, response, *controls]
    values = frame[cols].to_numpy(dtype=float)
    notes = check_dates(frame.index)
    if np.isinf(values).any():
        j = int(np.flatnonzero(np.isinf(values).any(axis=0))[0])
        raise _error(DataError, f"column {cols[j]!r} contains infinite values", column=cols[j])
    ok = np.isfinite(values).all(axis=1)
    if not ok.any():
        raise _error(DataError, "no row has a value in every column used")
    first, last = int(np.argmax(ok)), len(ok) - 1 - int(np.argmax(ok[::-1]))
    if not ok[first: last + 1].all():
        bad = first + int(np.argmax(~ok[first: last + 1]))
        col = next(c for j, c in enumerate(cols) if not np.isfinite(values[bad, j]))
        raise _error(DataError, f"column {col!r} has a missing value inside the sample (at "
                     f"{index_label(frame.index[bad])}); a lead or lag would join periods that "
                     "are not adjacent. Fill it, or use a stretch of data without it",
                     column=col)
    if first or last < len(ok) - 1:
        notes.append(f"{first} leading and {len(ok) - 1 - last} trailing rows with a missing "
                     "value left out")
    trimmed = pd.DataFrame(values[first: last + 1], columns=cols,
                           index=frame.index[first: last + 1])
    T = len(trimmed)
    start = max(lags, 1) if cumulative else lags
    k = 2 + lags * len(cols)
    n_last = T - start - horizons
    if 2 * n_last < T:
        h_max = (T - 2 * start) // 2
        hint = f"use H <= {h_max}" if h_max >= 0 else "use fewer lags"
        raise _error(SpecificationError, f"horizons H = {horizons} leave {max(n_last, 0)} of "
                     f"T = {T} observations at the longest horizon (with {start} lost to lags), "
                     f"fewer than half the sample; {hint}", horizon=horizons, H=horizons, T=T)
    if n_last <= k + 1:
        raise _error(SpecificationError, f"{k} coefficients but only {n_last} observations at "
                     f"horizon H = {horizons}; use fewer lags or controls", horizon=horizons,
                     H=horizons, T=T)
    used = trimmed.to_numpy()
    span = used[start: T - (horizons if common_sample else 0), 0]
    if np.ptp(span) == 0:
        raise _error(SpecificationError, f"the shock {shock!r} is constant ({span[0]:g}) in the "
                     "sample: there is no variation to project on", column=shock)
    if np.ptp(used[:, 1]) == 0:
        raise _error(SpecificationError, f"the response {response!r} is constant "
                     f"({used[0, 1]:g}) in the sample: nothing to explain", column=response)
    return trimmed, notes, start, controls, lags, horizons


class LocalProjections:
    """One least-squares fit per horizon h = 0..H and what is computed from them: impulse
    responses under any estimator (`irf`), pointwise, sup-t and Bonferroni bands (`bands`), the
    joint covariance across horizons (`joint`), the sensitivity of every horizon to the kernel
    and bandwidth (`sweep`), where the response stops being significant (`significance`),
    cumulative responses (`cumulative_irf`), bootstrap bands (`bootstrap`), and the
    lag-augmented projections (`augmented`). See the module docstring for the model and the
    samples."""

    kind = "local projections"

    def __init__(self, *, frame, response, shock, controls, lags, horizons, cumulative,
                 common_sample, start, notes, table=None, source_args=None):
        self.response, self.shock = response, shock
        self.controls = list(controls)
        self.lags, self.H = int(lags), int(horizons)
        self.cumulative, self.common_sample = bool(cumulative), bool(common_sample)
        self.start = int(start)
        self.data = frame                       # [shock, response, controls] over T periods
        self.index = frame.index
        self.T = len(frame)
        self.table = table
        self.source_args = dict(source_args or {})
        self.caches = Caches()
        self.notes = list(notes)
        self.notes.append("the shock is ordered first: lags 1..p of the shock, the response "
                          "and every control enter, no contemporaneous control")
        self.regressors = [shock] + [f"{c}, lag {lag}" for lag in range(1, self.lags + 1)
                                     for c in [shock, response, *self.controls]]
        self.fits = self._fit()
        self.terms = list(self.fits[0].terms)
        if len({f.nobs for f in self.fits}) > 1:
            self.notes.append(
                f"samples: horizon h uses t = {index_label(self.index[start])} to the date H - h "
                f"periods before the end (n_h = {self.fits[0].nobs} - h); the joint covariance "
                "stacks the horizons on the longest sample with zero contributions where a "
                "horizon has no observation")

    # ------------------------------------------------------------------ fitting
    def _wide(self) -> pd.DataFrame:
        d = self.data
        cols = {self.shock: d[self.shock]}
        for lag in range(1, self.lags + 1):
            for c in [self.shock, self.response, *self.controls]:
                cols[f"{c}, lag {lag}"] = d[c].shift(lag)
        y = d[self.response]
        for h in range(self.H + 1):
            lead = y.shift(-h)
            cols[response_name(self.response, h, self.cumulative)] = \
                lead - y.shift(1) if self.cumulative else lead
        return pd.DataFrame(cols, index=d.index)

    def _fit(self) -> list:
        wide = self._wide()
        regs = wide[self.regressors].to_numpy(dtype=float)
        fits = []
        with one_blas_thread():
            for h in range(self.H + 1):
                last = self.T - (self.H if self.common_sample else h)
                name = response_name(self.response, h, self.cumulative)
                # one float block per horizon: [regressors, response] over its own rows
                part = pd.DataFrame(np.column_stack([regs[self.start: last],
                                                     wide[name].to_numpy()[self.start: last]]),
                                    columns=[*self.regressors, name],
                                    index=self.index[self.start: last])
                try:
                    fit = fit_ols(part, response_name(self.response, h, self.cumulative),
                                  self.regressors, intercept=True)
                except LagwiseError as exc:
                    raise _error(type(exc), f"horizon {h}: {exc}", horizon=h) from None
                fits.append(fit)
        return fits

    # ------------------------------------------------------------------ what it is
    @property
    def horizons(self) -> range:
        return range(self.H + 1)

    def horizon(self, h: int):
        """Horizon h's fit: an ordinary least-squares fit (every time-series tool applies)."""
        if not _whole(h) or not 0 <= h <= self.H:
            raise _error(SpecificationError, f"no horizon {h!r}; horizons are 0..{self.H}",
                         horizon=h)
        return self.fits[int(h)]

    @property
    def estimates(self) -> pd.Series:
        """beta_h, the response at each horizon."""
        return pd.Series([f.beta[1] for f in self.fits], index=self._hindex(),
                         name="estimate")

    @property
    def nobs(self) -> np.ndarray:
        return np.array([f.nobs for f in self.fits])

    def _hindex(self) -> pd.Index:
        return pd.RangeIndex(self.H + 1, name="horizon")

    @property
    def samples(self) -> pd.DataFrame:
        """The sample of every horizon: first and last date t of the regressors, the date of
        the last response used (t + h), and n_h."""
        rows = []
        for h, f in enumerate(self.fits):
            last_t = self.start + f.nobs - 1
            rows.append({"first": index_label(self.index[self.start]),
                         "last": index_label(self.index[last_t]),
                         "last_response": index_label(self.index[last_t + h]),
                         "nobs": f.nobs})
        return pd.DataFrame(rows, index=self._hindex())

    @property
    def labels(self) -> list[str]:
        """The horizons' labels in the stacked model ("h0", "h1", ...)."""
        return [f"h{h}" for h in range(self.H + 1)]

    @property
    def stacked(self):
        """`lagwise.stack` of the horizons' fits (labels h0..hH): the joint covariance of every
        coefficient at every horizon under any time-series estimator."""
        return self.caches.get("stacked", lambda: stack(self.fits, labels=self.labels))

    @property
    def shock_series(self) -> SeriesModel:
        """The shock coefficient's influence series of every horizon, side by side on the
        stacked index (T_s x (H + 1)): z_{h,t} = [M_h g_{h,t}]_shock, zero where horizon h has
        no observation, taken from the stacked model's contributions and influence map. As a
        moment model with the identity influence map, V = T_s I S I' = sum k((t-s)/b) z_t z_s',
        the block of the stacked covariance that belongs to the shock coefficients, for every
        estimator that is a quadratic form of the contributions (HC0, kernels at a fixed
        bandwidth, EWC at a fixed B)."""
        def build():
            st = self.stacked
            rows = [st.terms.index(f"{lab}:{self.shock}") for lab in self.labels]
            z = st.working_contributions @ st.influence_map[rows].T
            return SeriesModel(z, np.eye(len(rows)), terms=self.labels,
                               beta=self.estimates.to_numpy(), index=st.index,
                               response=f"{self.response} on {self.shock}",
                               df_resid=int(min(f.df_resid for f in self.fits)))
        return self.caches.get("shock_series", build)

    def augmented(self, extra: int = 1) -> "LocalProjections":
        """The same projections with `extra` more lags of every variable (lag augmentation,
        Montiel Olea & Plagborg-Moller 2021), fitted once and kept."""
        if not _whole(extra) or extra < 0:
            raise _error(SpecificationError, f"extra lags must be a whole number >= 0, got "
                         f"{extra!r}")
        if extra == 0:
            return self

        def build():
            return fit_local_projections(self.data, self.response, self.shock, self.controls,
                                         lags=self.lags + int(extra), horizons=self.H,
                                         cumulative=self.cumulative,
                                         common_sample=self.common_sample)
        return self.caches.get(f"augmented{int(extra)}", build)

    @property
    def line(self) -> str:
        """The model in one line."""
        ctrl = f", controls {', '.join(self.controls)}" if self.controls else ""
        what = "y(t+h) - y(t-1)" if self.cumulative else "y(t+h)"
        return (f"local projections of {self.response} on {self.shock}: {what} for h = 0..{self.H}, "
                f"{self.lags} lag{'s' if self.lags != 1 else ''} of every variable{ctrl}; "
                f"{index_label(self.index[0])} to {index_label(self.index[-1])}, T = {self.T}, "
                f"n_h = {self.fits[0].nobs} to {self.fits[-1].nobs}")

    def __repr__(self):
        return (f"LocalProjections(response={self.response!r}, shock={self.shock!r}, "
                f"lags={self.lags}, H={self.H}, T={self.T})")

    def own_nbytes(self, seen=None) -> int:
        """Bytes held: the horizons' fits with their caches, the data, the stacked model and
        the other caches (the source Table is not counted: it belongs to its owner)."""
        seen = set() if seen is None else seen
        return sum(nbytes_of(f, seen) for f in self.fits) + nbytes_of(self.data, seen) \
            + self.caches.own_nbytes(seen)

    @property
    def nbytes(self) -> int:
        return self.own_nbytes()

    # ------------------------------------------------------------------ inference
    def irf(self, est=None, level: float = 0.90, reference: str = "auto") -> pd.DataFrame:
        """The impulse response under one estimator, one row per horizon: estimate, std_error,
        t_stat, p_value, ci_low, ci_high (pointwise), the critical value, the bandwidth, lags
        or B used, the law and n_h. `est`: an estimator from `lagwise.estimator(...)` (applied to
        each horizon's own fit: a fixed bandwidth, an automatic rule per horizon, EWC, HC, ...),
        `lagwise.horizon_rule(...)`, `lagwise.lag_augmented(...)`, or a name; default the
        horizon rule (Bartlett with at least h lags)."""
        return irf_table(self, as_lp_estimator(est), level, reference)

    def bands(self, est=None, level: float = 0.90, kind: str = "pointwise",
              reference: str = "auto", reps: int = 100_000, seed: int = 20240601) -> Bands:
        """Bands over the horizons: kind "pointwise" (each horizon's own interval), "sup-t"
        (simultaneous over h = 0..H: Montiel Olea & Plagborg-Moller 2019, from the joint
        covariance of the estimates) or "bonferroni". A DataFrame indexed by horizon with
        estimate, std_error, critical_value, ci_low, ci_high; `.attrs` say how."""
        return pointwise_bands(self, as_lp_estimator(est), level, kind, reference, reps, seed)

    def joint(self, est=None, level: float = 0.90, reference: str = "auto") -> JointCovariance:
        """The joint covariance of beta_0..beta_H under `est` (see lp_inference)."""
        lpest = as_lp_estimator(est)
        return joint_covariance(self, lpest, irf_table(self, lpest, level, reference))

    def sweep(self, kernels=None, bandwidths=None, small_sample: bool = False) -> LPSweep:
        """Every horizon's standard error and t along the bandwidth for every kernel, from one
        autocovariance cache per horizon (the shock's influence series)."""
        return sweep_horizons(self, kernels, bandwidths, small_sample)

    def significance(self, estimators=None, level: float = 0.90, kind: str = "pointwise",
                     reference: str = "auto") -> pd.DataFrame:
        """For each estimator: the horizons where beta_h = 0 is rejected, and the horizon at
        which the response stops being significant."""
        ests = default_estimators(self) if estimators is None else \
            [as_lp_estimator(e) for e in estimators]
        return significance_table(self, ests, level, kind, reference)

    def compare(self, estimators=None, level: float = 0.90, reference: str = "auto",
                kind: str = "pointwise") -> pd.DataFrame:
        """Every estimator's band at every horizon, one row per (estimator, horizon)."""
        ests = default_estimators(self) if estimators is None else \
            [as_lp_estimator(e) for e in estimators]
        frames = []
        for e in ests:
            b = self.bands(e, level, kind, reference)
            frames.append(b.assign(estimator=e.label).reset_index())
        return pd.concat(frames, ignore_index=True)

    def cumulative_irf(self, est=None, level: float = 0.90, reference: str = "auto"):
        """C_h = beta_0 + ... + beta_h with its standard error from the joint covariance."""
        return cumulative_table(self, as_lp_estimator(est), level, reference)

    def bootstrap(self, est=None, level: float = 0.90, scheme: str = "block",
                  reps: int = 2000, block: int | None = None, seed: int = 20240601,
                  progress=None) -> Bands:
        """Bootstrap bands (pointwise and sup-t critical values) from the stacked influence
        series: "block" (moving blocks) or "wild" (Rademacher); see lp_inference."""
        return bootstrap_bands(self, as_lp_estimator(est), level, scheme, reps, block, seed,
                               progress)


def fit_local_projections(data, response: str, shock: str, controls=(), lags: int = 1,
                          horizons: int = 12, cumulative: bool = False, time: str | None = None,
                          common_sample: bool = False) -> LocalProjections:
    """Local projections of `response` on `shock` for h = 0..horizons, with lags 1..`lags` of the
    shock, the response and each control (see the module docstring).

    data: a Table or a DataFrame with a regular time index (or `time`, a column of dates).
    cumulative: the response y_{t+h} - y_{t-1} (with lags >= 1 the shock coefficient equals the
    level regression's, since y_{t-1} is a regressor; sums of responses are `cumulative_irf`).
    common_sample: every horizon on the longest horizon's sample (statsmodels' convention).

    Raises SpecificationError / DataError (with `column`, `horizon`, `H`, `T` attributes where
    they apply) for horizons that leave fewer than half the sample, a constant shock, gaps in
    the dates, a missing value inside the sample, a response that is also a control or the
    shock, and unknown or non-numeric columns."""
    frame, notes, start, controls, lags, horizons = _prepare(
        data, response, shock, controls, lags, horizons, cumulative, time, common_sample)
    table, _, _, _ = frame_and_meta(data)
    return LocalProjections(frame=frame, response=response, shock=shock, controls=controls,
                            lags=lags, horizons=horizons, cumulative=cumulative,
                            common_sample=common_sample, start=start, notes=notes, table=table,
                            source_args={"response": response, "shock": shock,
                                         "controls": list(controls), "lags": lags,
                                         "horizons": horizons, "cumulative": bool(cumulative),
                                         "common_sample": bool(common_sample)})


def multiplier(numerator: LocalProjections, denominator: LocalProjections, est=None,
               level: float = 0.90, reference: str = "auto") -> pd.DataFrame:
    """m_h = C^num_h / C^den_h, the ratio of two cumulative responses to the same shock (e.g.
    cumulative output over cumulative spending), with the delta-method band and the Fieller
    (1954) set from the joint covariance of both projections' estimates (see lp_inference)."""
    return multiplier_table(numerator, denominator, as_lp_estimator(est), level, reference)
