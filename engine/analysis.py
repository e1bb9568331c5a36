"""Analysis: derived columns per reading, fits per machine and session, session comparison.

A reading frame (columns :data:`engine.columns.READING_COLUMNS`, SI units) goes through
:func:`derive`, which adds :data:`engine.columns.DERIVED_COLUMNS`: the ceiling current of every
reading, the efficiency with its propagated uncertainty, the charge per revolution, the achieved
surface density and the air figures. :func:`findings` summarises the derived frame per machine
(or per machine and session) with least-squares fits and their 95 % confidence intervals, and
:func:`compare_sessions` says whether one session of a machine delivered more than another at
the same speed and humidity.

Everything is vectorised over the readings; Python loops run over machines or groups only. The
least-squares fits are numpy closed forms (:func:`fit_line`, :func:`fit_linear_model`), checked
in the tests against statsmodels and scipy.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine import columns as col
from engine.air import (
    REFERENCE_PRESSURE_PA,
    REFERENCE_TEMPERATURE_K,
    absolute_humidity,
    breakdown_field,
    charge_density_limit,
    dew_point,
    relative_air_density,
)
from engine.carriers import LINEAR, ROTATION, Belt
from engine.ceiling import ceiling_current
from engine.errors import InputError
from engine.machines import Machine, MachineFile, Site
from engine.units import speed_unit_conversion, split_quantity

#: Confidence level of every interval in this module [-].
CONFIDENCE = 0.95
#: Fewest usable readings for a straight-line fit (two parameters and one degree of freedom).
MIN_READINGS_FOR_FIT = 3
#: Smallest spread of relative humidity for the humidity fit [-] (5 percentage points).
MIN_RH_SPAN = 0.05
#: Fewest usable readings with humidity for the logistic decline.
LOGISTIC_MIN_READINGS = 10
#: Smallest spread of relative humidity for the logistic decline [-] (20 percentage points).
LOGISTIC_MIN_RH_SPAN = 0.20
#: The wettest quarter of the readings must keep at most this share of the driest quarter's
#: median efficiency for the data to "span the drop" of the logistic decline [-].
LOGISTIC_DROP_RATIO = 0.5
#: Default relative humidity at which the humidity fit is evaluated [-].
REFERENCE_RH = 0.45

#: Flag codes that :func:`derive` owns: removed from the input and computed afresh, so that
#: deriving again with corrected machines clears them.
DERIVE_FLAGS = ("negative", "unknown_machine", "speed_kind", "above_ceiling")
#: Added by :func:`derive` to a reading that carries no flag but lacks its current or speed,
#: or whose efficiency cannot be computed.
MISSING_FLAG = "missing_value"
#: Coverage factor of the rule "within uncertainty of the ceiling" and of the rule "near zero"
#: [-]: a reading is flagged ``above_ceiling`` only when its efficiency exceeds 1 by more than
#: this many standard uncertainties, and a current is flagged ``negative`` only when it lies
#: below zero by more than this many standard uncertainties of the meter. 2 gives about 95 %
#: coverage for a normal distribution (JCGM 100:2008, clause 6.3).
COVERAGE_FACTOR = 2.0

_NUMERIC_COLUMNS = (
    col.ELAPSED_S, col.SPEED_REV_S, col.BELT_SPEED_M_S, col.CURRENT_A, col.RH,
    col.TEMPERATURE_K, col.PRESSURE_PA, col.VOLTAGE_V,
)
_TEXT_COLUMNS = (col.MACHINE, col.SESSION, col.NOTE, col.FLAGS)


# --- Least squares with confidence intervals ------------------------------------------------

def t_critical(degrees_of_freedom, confidence: float = CONFIDENCE):
    """Two-sided critical value of Student's t distribution.

    Parameters
    ----------
    degrees_of_freedom : float or array_like
        Degrees of freedom [-].
    confidence : float, optional
        Confidence level [-], default 0.95.

    Returns
    -------
    float or numpy.ndarray
        t such that P(|T| <= t) = confidence.
    """
    from scipy import special, stats  # imported when first needed: evaluate never fits

    probability = 0.5 + confidence / 2.0
    degrees = np.asarray(degrees_of_freedom, dtype=float)
    if not 0.0 < probability < 1.0 or not np.all(degrees > 0):
        return stats.t.ppf(probability, degrees_of_freedom)
    # What stats.t.ppf computes for these arguments (its _ppf is special.stdtrit), without its
    # argument handling: 3 ms a call, most of the findings' time with hundreds of groups.
    return special.stdtrit(degrees, probability)[()]


@dataclass(frozen=True)
class LineFit:
    """A least-squares straight line y = slope * x + intercept with its uncertainties.

    Attributes
    ----------
    slope, intercept : float
        Fitted parameters [unit of y per unit of x], [unit of y].
    slope_se, intercept_se : float
        Standard errors of the parameters.
    slope_ci, intercept_ci : tuple of float
        Confidence intervals at :attr:`confidence` (Student's t with n - 2 degrees of freedom).
    r_squared : float
        Coefficient of determination [-]; NaN when y has no spread.
    n : int
        Number of points.
    residual_variance : float
        s^2 = sum of squared residuals / (n - 2).
    x_mean, sxx : float
        Mean of x and sum of squared deviations of x, kept for :meth:`mean_at`.
    confidence : float
        Confidence level of the intervals [-].
    """

    slope: float
    intercept: float
    slope_se: float
    intercept_se: float
    slope_ci: tuple[float, float]
    intercept_ci: tuple[float, float]
    r_squared: float
    n: int
    residual_variance: float
    x_mean: float
    sxx: float
    confidence: float = CONFIDENCE

    def mean_at(self, x: float) -> tuple[float, tuple[float, float]]:
        """The fitted line at ``x`` and the confidence interval of that mean.

        Notes
        -----
        se = s * sqrt(1/n + (x - x_mean)^2 / Sxx), the standard error of the fitted mean.
        """
        value = self.intercept + self.slope * x
        se = math.sqrt(self.residual_variance * (1.0 / self.n + (x - self.x_mean) ** 2 / self.sxx))
        half = float(t_critical(self.n - 2, self.confidence)) * se
        return value, (value - half, value + half)


def fit_line(x, y, confidence: float = CONFIDENCE) -> LineFit:
    """Ordinary least-squares straight line through points, in closed form.

    Parameters
    ----------
    x, y : array_like
        Finite coordinates of equal length (any units).
    confidence : float, optional
        Confidence level of the intervals [-], default 0.95.

    Returns
    -------
    LineFit

    Raises
    ------
    InputError
        With fewer than 3 points or when x has no spread.

    Notes
    -----
    slope = Sxy / Sxx, intercept = y_mean - slope * x_mean, s^2 = SSres / (n - 2),
    se(slope) = s / sqrt(Sxx), se(intercept) = s * sqrt(1/n + x_mean^2 / Sxx); intervals are
    parameter +- t(n - 2) * se, and R^2 = 1 - SSres / Syy.

    References
    ----------
    Montgomery, D. C., Peck, E. A. and Vining, G. G., Introduction to Linear Regression
    Analysis, 5th ed., Wiley, 2012, chapter 2.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = x.size
    if n < MIN_READINGS_FOR_FIT:
        raise InputError(f"a straight-line fit needs at least {MIN_READINGS_FOR_FIT} points, "
                         f"got {n}")
    x_mean = float(x.mean())
    y_mean = float(y.mean())
    dx = x - x_mean
    dy = y - y_mean
    sxx = _dot(dx, dx)
    if not _has_spread(x, sxx):
        raise InputError("a straight-line fit needs x values that differ; all are the same")
    slope = _dot(dx, dy) / sxx
    intercept = y_mean - slope * x_mean
    residual = dy - slope * dx
    ss_res = _dot(residual, residual)
    syy = _dot(dy, dy)
    variance = ss_res / (n - 2)
    slope_se = math.sqrt(variance / sxx)
    intercept_se = math.sqrt(variance * (1.0 / n + x_mean**2 / sxx))
    half = float(t_critical(n - 2, confidence))
    return LineFit(
        slope=slope,
        intercept=intercept,
        slope_se=slope_se,
        intercept_se=intercept_se,
        slope_ci=(slope - half * slope_se, slope + half * slope_se),
        intercept_ci=(intercept - half * intercept_se, intercept + half * intercept_se),
        r_squared=1.0 - ss_res / syy if syy > 0 else math.nan,
        n=n,
        residual_variance=variance,
        x_mean=x_mean,
        sxx=sxx,
        confidence=confidence,
    )


def _dot(first: np.ndarray, second: np.ndarray) -> float:
    """Sum of products of two vectors.

    einsum keeps it off the threaded BLAS, whose threads stall for milliseconds per call when
    other processes share the cores.
    """
    return float(np.einsum("i,i->", first, second))


def _has_spread(values: np.ndarray, sum_of_squares: float = 1.0) -> bool:
    """Whether values differ beyond rounding (spread above 1e-9 of their size)."""
    if values.size < 2 or not sum_of_squares > 0:
        return False
    spread = float(np.ptp(values))
    return spread > 0 and spread > 1e-9 * float(np.max(np.abs(values)))


@dataclass(frozen=True)
class LinearModel:
    """Ordinary least squares y = X b with its uncertainties.

    Attributes
    ----------
    names : tuple of str
        Names of the columns of X.
    coefficients, standard_errors : numpy.ndarray
        b and se(b).
    conf_int : numpy.ndarray
        Shape (p, 2): lower and upper limits at :attr:`confidence`.
    r_squared : float
        Coefficient of determination about the mean [-] (the model has an intercept).
    degrees_of_freedom : int
        n - p.
    confidence : float
        Confidence level [-].
    covariance : numpy.ndarray or None
        Shape (p, p): s^2 (X^T X)^-1, for figures derived from several coefficients.
    """

    names: tuple[str, ...]
    coefficients: np.ndarray
    standard_errors: np.ndarray
    conf_int: np.ndarray
    r_squared: float
    degrees_of_freedom: int
    confidence: float = CONFIDENCE
    covariance: np.ndarray | None = None

    def coefficient(self, name: str) -> tuple[float, tuple[float, float]]:
        """One coefficient and its confidence interval, by name."""
        index = self.names.index(name)
        low, high = self.conf_int[index]
        return float(self.coefficients[index]), (float(low), float(high))


def fit_linear_model(design, y, names: Sequence[str],
                     confidence: float = CONFIDENCE) -> LinearModel:
    """Multiple linear regression by ordinary least squares (QR decomposition).

    Parameters
    ----------
    design : array_like
        Design matrix X, shape (n, p), with a column of ones for the intercept.
    y : array_like
        Response, shape (n,).
    names : sequence of str
        Names of the p columns.
    confidence : float, optional
        Confidence level [-], default 0.95.

    Returns
    -------
    LinearModel

    Raises
    ------
    InputError
        When there are no more points than parameters or the columns are collinear.

    Notes
    -----
    X = Q R; b = R^-1 Q^T y; cov(b) = s^2 (R^T R)^-1 with s^2 = SSres / (n - p); intervals are
    b +- t(n - p) * se(b).

    References
    ----------
    Montgomery, D. C., Peck, E. A. and Vining, G. G., Introduction to Linear Regression
    Analysis, 5th ed., Wiley, 2012, chapter 3.
    """
    design = np.asarray(design, dtype=float)
    y = np.asarray(y, dtype=float)
    n, p = design.shape
    if n <= p:
        raise InputError(f"a regression with {p} terms needs more than {p} readings, got {n}")
    q, r = np.linalg.qr(design)
    diagonal = np.abs(np.diag(r))
    if diagonal.min() <= 1e-10 * max(diagonal.max(), 1e-300):
        raise InputError("the regression terms are collinear: one of them is fixed by the others")
    coefficients = np.linalg.solve(r, np.dot(q.T, y))
    residual = y - np.dot(design, coefficients)
    dof = n - p
    variance = _dot(residual, residual) / dof
    r_inverse = np.linalg.inv(r)
    standard_errors = np.sqrt(variance * np.sum(r_inverse**2, axis=1))
    half = float(t_critical(dof, confidence)) * standard_errors
    centred = y - y.mean()
    ss_tot = _dot(centred, centred)
    return LinearModel(
        names=tuple(names),
        coefficients=coefficients,
        standard_errors=standard_errors,
        conf_int=np.column_stack([coefficients - half, coefficients + half]),
        r_squared=1.0 - _dot(residual, residual) / ss_tot if ss_tot > 0 else math.nan,
        degrees_of_freedom=dof,
        confidence=confidence,
        covariance=variance * (r_inverse @ r_inverse.T),
    )


def welch_difference(a, b, confidence: float = CONFIDENCE) -> tuple[float, tuple[float, float]]:
    """Difference of two means (b - a) with Welch's confidence interval.

    Parameters
    ----------
    a, b : array_like
        Two samples, at least 2 values each.
    confidence : float, optional
        Confidence level [-], default 0.95.

    Returns
    -------
    tuple
        mean(b) - mean(a) and its interval.

    Notes
    -----
    se^2 = s_a^2 / n_a + s_b^2 / n_b, degrees of freedom by Welch-Satterthwaite:
    nu = se^4 / ((s_a^2/n_a)^2 / (n_a - 1) + (s_b^2/n_b)^2 / (n_b - 1)).

    References
    ----------
    Welch, B. L., 1947: The generalization of "Student's" problem when several different
    population variances are involved. Biometrika, 34, 28-35.
    """
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    difference = float(b.mean() - a.mean())
    share_a = a.var(ddof=1) / a.size
    share_b = b.var(ddof=1) / b.size
    variance = share_a + share_b
    if not variance > 0:
        return difference, (difference, difference)
    dof = variance**2 / (share_a**2 / (a.size - 1) + share_b**2 / (b.size - 1))
    half = float(t_critical(dof, confidence)) * math.sqrt(variance)
    return difference, (difference - half, difference + half)


def logistic_efficiency(relative_humidity, dry_efficiency, rh_half, width):
    """Logistic decline of efficiency with relative humidity.

    Parameters
    ----------
    relative_humidity : float or array_like
        Relative humidity as a fraction [-].
    dry_efficiency : float
        Efficiency of dry air, the plateau [-].
    rh_half : float
        Relative humidity at which the efficiency is half the dry value [-].
    width : float
        Steepness of the drop [-]: the efficiency falls from 73 % to 27 % of the dry value
        between rh_half - width and rh_half + width.

    Returns
    -------
    float or numpy.ndarray
        eta = e_dry / (1 + exp((rh - rh_half) / width)) [-].

    Notes
    -----
    An empirical model (common practice, no published source) of the surface leakage that
    sets in above 60 to 70 % relative humidity.
    """
    relative_humidity = np.asarray(relative_humidity, dtype=float)
    from scipy import special

    return dry_efficiency * special.expit(-(relative_humidity - rh_half) / width)


def _logistic_jacobian(relative_humidity, dry_efficiency, rh_half, width):
    from scipy import special

    share = special.expit(-(relative_humidity - rh_half) / width)
    slope = dry_efficiency * share * (1.0 - share) / width
    return np.column_stack([share, slope, slope * (relative_humidity - rh_half) / width])


# --- Per-machine constants ------------------------------------------------------------------

def _as_mapping(machines: Mapping[str, Machine] | MachineFile) -> dict[str, Machine]:
    if isinstance(machines, MachineFile):
        return machines.by_id()
    if not isinstance(machines, Mapping):
        raise InputError("machines must be a machines file or a mapping of machine id to machine")
    return dict(machines)


def _speed_tolerance_kind(machine: Machine) -> str:
    """Whether an absolute speed tolerance was written as a rotation rate or a linear speed."""
    text = machine.tolerance_spec.get("speed") if machine.tolerance_spec else None
    if not isinstance(text, str):
        return ROTATION
    try:
        _number, unit_text = split_quantity(text, "speed tolerance")
        return speed_unit_conversion(unit_text, "speed tolerance")[1]
    except InputError:
        return ROTATION


def _relative_part(tolerance) -> float:
    return tolerance.value if tolerance is not None and tolerance.relative else 0.0


def _absolute_part(tolerance) -> float:
    return tolerance.value if tolerance is not None and not tolerance.relative else 0.0


@dataclass(frozen=True)
class _MachineTable:
    """Per-machine constants as arrays; index len(ids) is the 'unknown machine' slot (NaN)."""

    ids: tuple[str, ...]
    values: dict[str, np.ndarray]

    def take(self, name: str, codes: np.ndarray) -> np.ndarray:
        return self.values[name][codes]


def _machine_table(machines: Mapping[str, Machine]) -> _MachineTable:
    ids = tuple(machines)
    names = ("area_per_rev_m2", "width_m", "length_per_rev_m", "accepts_rotation",
             "accepts_linear", "units", "reference_field_v_m",
             "current_relative", "current_absolute_a", "speed_relative",
             "speed_absolute_rev_s", "speed_absolute_m_s", "field_relative",
             "area_relative_rotation", "area_relative_linear", "air_gap_m")
    values = {name: np.full(len(ids) + 1, np.nan) for name in names}
    values["accepts_rotation"] = np.zeros(len(ids) + 1, dtype=bool)
    values["accepts_linear"] = np.zeros(len(ids) + 1, dtype=bool)
    for index, machine_id in enumerate(ids):
        machine = machines[machine_id]
        carrier = machine.carrier
        tolerances = machine.tolerances or {}
        is_belt = isinstance(carrier, Belt)
        area = carrier.area_per_rev_m2
        length = carrier.length_per_rev_m if is_belt else None
        values["area_per_rev_m2"][index] = math.nan if area is None else area
        values["width_m"][index] = carrier.width_m if is_belt else math.nan
        values["length_per_rev_m"][index] = math.nan if length is None else length
        values["accepts_rotation"][index] = ROTATION in carrier.speed_kinds
        values["accepts_linear"][index] = LINEAR in carrier.speed_kinds
        values["units"][index] = machine.units
        values["reference_field_v_m"][index] = machine.reference_field_v_m
        values["air_gap_m"][index] = (math.nan if machine.air_gap_m is None
                                      else machine.air_gap_m)

        current = tolerances.get("current")
        values["current_relative"][index] = _relative_part(current)
        values["current_absolute_a"][index] = _absolute_part(current)

        speed = tolerances.get("speed")
        values["speed_relative"][index] = _relative_part(speed)
        absolute_speed = _absolute_part(speed)
        # An absolute speed tolerance converts between rev/s and m/s through the belt length
        # per revolution; where it cannot, the uncertainty of the other kind is unknown (NaN).
        length_or_nan = math.nan if length is None else length
        if absolute_speed == 0.0:
            values["speed_absolute_rev_s"][index] = 0.0
            values["speed_absolute_m_s"][index] = 0.0
        elif _speed_tolerance_kind(machine) == LINEAR:
            values["speed_absolute_m_s"][index] = absolute_speed
            values["speed_absolute_rev_s"][index] = absolute_speed / length_or_nan
        else:
            values["speed_absolute_rev_s"][index] = absolute_speed
            values["speed_absolute_m_s"][index] = absolute_speed * length_or_nan

        field = tolerances.get("breakdown_field")
        values["field_relative"][index] = (
            0.0 if field is None else field.absolute_for(machine.reference_field_v_m)
            / machine.reference_field_v_m
        )
        values["area_relative_rotation"][index] = carrier.area_relative_uncertainty(
            tolerances, ROTATION)
        values["area_relative_linear"][index] = (
            carrier.area_relative_uncertainty(tolerances, LINEAR) if is_belt else math.nan
        )
    return _MachineTable(ids, values)


def _machine_codes(machine_column: pd.Series, ids: Sequence[str]) -> np.ndarray:
    """Index of each reading's machine in ``ids``; len(ids) for a machine not in the list."""
    codes, uniques = pd.factorize(machine_column, use_na_sentinel=True)
    lookup = {machine_id: index for index, machine_id in enumerate(ids)}
    unique_codes = np.array([lookup.get(value, len(ids)) for value in uniques] + [len(ids)],
                            dtype=np.intp)
    # factorize gives -1 for a missing id: it lands on the appended 'unknown' entry.
    return unique_codes[codes]


# --- Flags ------------------------------------------------------------------------------------

def _clean_flags(readings: pd.DataFrame) -> pd.Series:
    if col.FLAGS not in readings:
        return pd.Series("", index=readings.index, dtype="str")
    flags = readings[col.FLAGS]
    if flags.isna().any():
        flags = flags.fillna("")
    return flags.astype("str")


def _flag_texts(flags: pd.Series, additions: Sequence[tuple[str, np.ndarray]],
                owned_codes: Sequence[str] = DERIVE_FLAGS) -> tuple[np.ndarray, list[str]]:
    """Remove the codes that derive owns, then append codes where their masks are true: the
    new flags text of each reading as a code into a list of distinct texts.

    Flags take few distinct values, so the work runs once per distinct combination of a flags
    text and the masks, never once per reading. Existing codes keep their order; new codes
    follow in the order of ``additions``.
    """
    text_codes, texts = pd.factorize(flags)
    return _added_flags(text_codes, [str(text) for text in texts], additions, owned_codes)


def _added_flags(text_codes: np.ndarray, texts: Sequence[str],
                 additions: Sequence[tuple[str, np.ndarray]],
                 owned_codes: Sequence[str]) -> tuple[np.ndarray, list[str]]:
    """:func:`_flag_texts` of flags given as codes into ``texts``."""
    key = text_codes.astype(np.int64)
    for _code, mask in additions:
        key = key * 2 + mask.astype(np.int64)
    key_codes, keys = pd.factorize(key)
    owned = set(owned_codes)
    new_texts = []
    for combined in keys:  # one pass per distinct combination
        bits = [bool((int(combined) >> shift) & 1) for shift in range(len(additions) - 1, -1, -1)]
        text = texts[int(combined) >> len(additions)]
        kept = [code for code in text.split(";") if code and code not in owned]
        kept += [code for (code, _mask), on in zip(additions, bits, strict=True)
                 if on and code not in kept]
        new_texts.append(";".join(kept))
    return key_codes, new_texts


# --- derive ------------------------------------------------------------------------------------

def _check_readings(readings: pd.DataFrame, what: str = "readings") -> pd.DataFrame:
    if not isinstance(readings, pd.DataFrame):
        raise InputError(f"{what} must be a table of readings (a pandas DataFrame)")
    for required in (col.MACHINE, col.CURRENT_A):
        if required not in readings:
            raise InputError(f"{what}: the column '{required}' is missing; read the file "
                             "through the readings import, which maps and names the columns")
    if col.SPEED_REV_S not in readings and col.BELT_SPEED_M_S not in readings:
        raise InputError(f"{what}: there is no speed column ('{col.SPEED_REV_S}' or "
                         f"'{col.BELT_SPEED_M_S}'); map the speed column of the file")
    for name in _NUMERIC_COLUMNS:
        if name in readings and not (
            pd.api.types.is_numeric_dtype(readings[name])
            and not pd.api.types.is_bool_dtype(readings[name])
        ):
            raise InputError(f"{what}: the column '{name}' must hold numbers in SI units; "
                             "read the file through the readings import, which converts units")
    return readings


def derive(readings: pd.DataFrame, machines: Mapping[str, Machine] | MachineFile,
           site: Site | None = None) -> pd.DataFrame:
    """Ceiling, efficiency and the other derived columns of every reading.

    Parameters
    ----------
    readings : pandas.DataFrame
        Columns :data:`engine.columns.READING_COLUMNS` in SI units; ``machine`` and
        ``current_a`` and one of the speed columns are required, the others are filled
        (NaN or "") when absent.
    machines : mapping of str to Machine, or MachineFile
        The machines, keyed by id.
    site : Site, optional
        Air pressure [Pa] and temperature [K] used where a reading has none. Default: the site
        of ``machines`` when it is a MachineFile, else the IEC 60060-1 reference atmosphere
        (101.3 kPa, 293.15 K).

    Returns
    -------
    pandas.DataFrame
        A copy of ``readings``, same rows in the same order with the same index, with
        :data:`engine.columns.DERIVED_COLUMNS` added (SI units):

        - ``ceiling_a`` I_c = eps0 * E_ref * delta * A_swept * units [A], with the machine's
          units from its arrangement or N * k (see :attr:`engine.machines.Machine.units`);
        - ``efficiency`` I / I_c [-] (NaN where the ceiling is unknown or zero);
        - ``efficiency_u`` its 1-sigma uncertainty [-] (see Notes);
        - ``charge_per_rev_c`` I / f [C], where the rotation rate is known;
        - ``surface_density_c_m2`` I / (A_swept * units) [C/m^2], the density each unit
          carried (efficiency = surface density / sigma_limit);
        - ``relative_air_density`` delta [-], ``abs_humidity_kg_m3`` [kg/m^3],
          ``dew_point_k`` [K].

        ``speed_rev_s`` is filled for a belt read in m/s when its roller diameter or loop
        length is known: f = v / (length per revolution).

    Raises
    ------
    InputError
        When a required column is missing or a numeric column holds text.

    Notes
    -----
    Flags: the codes ``negative`` (a negative speed, or a current below zero by more than
    :data:`COVERAGE_FACTOR` times the meter's standard uncertainty: a current a little below
    zero within the meter's tolerance is a reading near zero and stays in the fits),
    ``unknown_machine`` (machine id not in ``machines``), ``speed_kind`` (a linear speed for a
    disc, cylinder or custom carrier, or a rotation rate for a belt with neither roller
    diameter nor loop length) and ``above_ceiling`` (efficiency above 1 by more than
    :data:`COVERAGE_FACTOR` times its own standard uncertainty: the rule "within uncertainty of
    the ceiling" keeps a reading whose efficiency is within that margin of 100 %) are computed
    afresh on every call: stale ones from an earlier call are removed first. Every other flag
    is kept. ``missing_value`` is added to a reading with no flag whose current or speed is
    empty, or whose efficiency cannot be computed, so that every reading without a flag has a
    finite efficiency. A reading with both speeds is taken as a rotation rate.

    Uncertainty, first order, 1 sigma, with eta = I / (eps0 E_ref delta A f units):

        (u(eta) / eta)^2 = u_rel(I)^2 + u_rel(A)^2 + u_rel(f)^2 + u_rel(E_ref)^2

    from the machine's tolerances (keys ``current``, ``speed``, ``breakdown_field`` and the
    geometry keys, the last through ``carrier.area_relative_uncertainty``). An absolute
    current or speed tolerance counts against each reading's own value. For a belt read in
    m/s, A f is w v and only the width's tolerance enters the area term. The air density is
    taken as exact, and a machine without tolerances gets 0. An absolute speed tolerance in
    m/s for a carrier read in rev/s (or the reverse) converts through the belt's length per
    revolution; where no such length exists the uncertainty is NaN. Written in absolute terms
    so that a zero current keeps a finite value:
    u(eta)^2 = (u(I) / I_c)^2 + eta^2 (u_rel(A)^2 + u_rel(f)^2 + u_rel(E_ref)^2).

    References
    ----------
    JCGM 100:2008, Evaluation of measurement data - Guide to the expression of uncertainty in
    measurement, clause 5.1 (law of propagation of uncertainty).
    """
    readings = _check_readings(readings)
    machine_map = _as_mapping(machines)
    if site is None:
        site = machines.site if isinstance(machines, MachineFile) else Site(
            REFERENCE_PRESSURE_PA, REFERENCE_TEMPERATURE_K)

    out = readings.copy(deep=False)
    for name in _NUMERIC_COLUMNS:
        if name not in out:
            out[name] = np.nan
    for name in _TEXT_COLUMNS:
        if name not in out:
            out[name] = ""
    table = _machine_table(machine_map)
    codes = _machine_codes(out[col.MACHINE], table.ids)
    known = codes < len(table.ids)

    current = out[col.CURRENT_A].to_numpy(dtype=float)
    speed_rev_s = out[col.SPEED_REV_S].to_numpy(dtype=float)
    belt_speed = out[col.BELT_SPEED_M_S].to_numpy(dtype=float)
    has_rotation = np.isfinite(speed_rev_s)
    read_linear = ~has_rotation & np.isfinite(belt_speed)

    accepts_rotation = table.take("accepts_rotation", codes)
    accepts_linear = table.take("accepts_linear", codes)
    wrong_kind = known & ((has_rotation & ~accepts_rotation) | (read_linear & ~accepts_linear))

    length_per_rev = table.take("length_per_rev_m", codes)
    filled_speed = np.where(read_linear, belt_speed / length_per_rev, speed_rev_s)

    swept = np.where(read_linear, table.take("width_m", codes) * belt_speed,
                     table.take("area_per_rev_m2", codes) * speed_rev_s)
    swept[wrong_kind] = np.nan

    pressure = out[col.PRESSURE_PA].to_numpy(dtype=float)
    temperature = out[col.TEMPERATURE_K].to_numpy(dtype=float)
    pressure = np.where(np.isfinite(pressure), pressure, site.pressure_pa)
    temperature = np.where(np.isfinite(temperature), temperature, site.temperature_k)
    relative_humidity = out[col.RH].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        delta = relative_air_density(pressure, temperature)
        sigma = charge_density_limit(breakdown_field(delta, table.take("reference_field_v_m",
                                                                        codes),
                                                     table.take("air_gap_m", codes)))
        units = table.take("units", codes)
        ceiling = ceiling_current(sigma, swept, units)
        efficiency = _divide(current, ceiling)
        charge_per_rev = _divide(current, filled_speed)
        surface_density = _divide(current, swept * units)

        current_u = (table.take("current_relative", codes) * np.abs(current)
                     + table.take("current_absolute_a", codes))
        speed_u_relative = table.take("speed_relative", codes) + np.where(
            read_linear,
            _divide(table.take("speed_absolute_m_s", codes), np.abs(belt_speed)),
            _divide(table.take("speed_absolute_rev_s", codes), np.abs(speed_rev_s)),
        )
        area_u_relative = np.where(read_linear, table.take("area_relative_linear", codes),
                                   table.take("area_relative_rotation", codes))
        relative_sum = (area_u_relative**2 + speed_u_relative**2
                        + table.take("field_relative", codes) ** 2)
        efficiency_u = np.sqrt(_divide(current_u, ceiling) ** 2 + efficiency**2 * relative_sum)
        efficiency_u[~np.isfinite(efficiency)] = np.nan

        humidity = absolute_humidity(relative_humidity, temperature)
        dew = dew_point(relative_humidity, temperature)

    flags = _clean_flags(out)
    missing = ((flags == "").to_numpy()
               & (~np.isfinite(current) | ~(has_rotation | np.isfinite(belt_speed))))
    # An unknown uncertainty counts as none; an infinite one stays infinite (no overflow).
    negative = ((speed_rev_s < 0) | (belt_speed < 0)
                | (current < -COVERAGE_FACTOR * np.nan_to_num(current_u, nan=0.0,
                                                              posinf=np.inf)))
    above = efficiency > 1.0 + COVERAGE_FACTOR * np.nan_to_num(efficiency_u, nan=0.0,
                                                               posinf=np.inf)
    after_codes, after_texts = _flag_texts(flags, [
        (MISSING_FLAG, missing),
        ("negative", negative),
        ("unknown_machine", ~known),
        ("speed_kind", wrong_kind),
        ("above_ceiling", above),
    ])
    # A reading without any flag must give an efficiency, so that used + flagged = total.
    no_efficiency = (np.array([text == "" for text in after_texts], dtype=bool)[after_codes]
                     & ~np.isfinite(efficiency))
    final_codes, final_texts = _added_flags(after_codes, after_texts,
                                            [(MISSING_FLAG, no_efficiency)], owned_codes=())
    out[col.SPEED_REV_S] = filled_speed
    # Placed by position, so repeated row labels cannot misalign it; one take of the texts.
    out[col.FLAGS] = pd.array(final_texts, dtype="str").take(final_codes)
    out[col.CEILING_A] = ceiling
    out[col.EFFICIENCY] = efficiency
    out[col.EFFICIENCY_U] = efficiency_u
    out[col.CHARGE_PER_REV_C] = charge_per_rev
    out[col.SURFACE_DENSITY_C_M2] = surface_density
    out[col.RELATIVE_AIR_DENSITY] = delta
    out[col.ABS_HUMIDITY_KG_M3] = humidity
    out[col.DEW_POINT_K] = dew
    return out


def _divide(numerator: np.ndarray, denominator: np.ndarray) -> np.ndarray:
    """numerator / denominator, NaN where the denominator is zero or not finite."""
    numerator, denominator = np.broadcast_arrays(np.asarray(numerator, dtype=float),
                                                 np.asarray(denominator, dtype=float))
    result = np.full(numerator.shape, np.nan)
    usable = np.isfinite(denominator) & (denominator != 0)
    np.divide(numerator, denominator, out=result, where=usable)
    return result


# --- findings -----------------------------------------------------------------------------------

FINDINGS_COLUMNS = (
    "machine", "session", "carrier", "readings_total", "readings_used", "readings_flagged",
    "efficiency_median", "efficiency_q25", "efficiency_q75", "efficiency_u_median",
    "speed_fit_on", "charge_per_rev_nC", "charge_per_rev_ci_nC", "charge_per_metre_nC",
    "charge_per_metre_ci_nC", "offset_current_uA", "offset_current_ci_uA", "fit_r2",
    "charge_density_limit_uC_m2", "units", "units_rule", "units_basis", "observed_units",
    "observed_units_ci", "rh_min_pct", "rh_max_pct", "humidity_slope_per_10pct",
    "humidity_slope_per_10pct_ci", "efficiency_at_reference_rh",
    "efficiency_at_reference_rh_ci", "humidity_model", "logistic_rh_half_pct",
    "logistic_rh_half_ci_pct",
    "logistic_dry_efficiency", "logistic_dry_efficiency_ci", "logistic_width_pct", "notes",
)
"""Columns of :func:`findings`, in order."""

#: Columns of the derived readings that :func:`findings` reads (a cache may load only these).
FINDINGS_INPUT_COLUMNS = (
    col.MACHINE, col.SESSION, col.FLAGS, col.CURRENT_A, col.SPEED_REV_S, col.BELT_SPEED_M_S,
    col.EFFICIENCY, col.EFFICIENCY_U, col.RH, col.RELATIVE_AIR_DENSITY,
)


def _check_derived(derived: pd.DataFrame) -> pd.DataFrame:
    derived = _check_readings(derived, "derived readings")
    for name in (col.EFFICIENCY, col.RELATIVE_AIR_DENSITY, col.FLAGS):
        if name not in derived:
            raise InputError(f"derived readings: the column '{name}' is missing; run the "
                             "readings through analysis.derive first")
    return derived


def _scaled(interval: tuple[float, float], factor: float) -> tuple[float, float]:
    low, high = interval[0] * factor, interval[1] * factor
    return (min(low, high), max(low, high))


def _group_positions(group_codes: np.ndarray, group_count: int) -> list[np.ndarray]:
    if group_count <= np.iinfo(np.int16).max:
        group_codes = group_codes.astype(np.int16)  # numpy sorts small integers stably by radix
    order = np.argsort(group_codes, kind="stable")
    if group_codes.size and group_codes.min() < 0:  # codes below 0 belong to no group
        bounds = np.searchsorted(group_codes[order], np.arange(group_count + 1))
    else:  # where each group's run starts, by counting
        bounds = np.zeros(group_count + 1, dtype=np.int64)
        np.cumsum(np.bincount(group_codes, minlength=group_count)[:group_count], out=bounds[1:])
    return [order[bounds[index]:bounds[index + 1]] for index in range(group_count)]


def _compact_codes(codes: np.ndarray, code_count: int) -> tuple[np.ndarray, np.ndarray]:
    """``np.unique(codes, return_inverse=True)`` for codes in ``0 .. code_count - 1``, by counting
    instead of sorting when the range is small (linear time; a sort of 10^7 codes took seconds).
    """
    if code_count > max(4 * codes.size, 1 << 16):
        return np.unique(codes, return_inverse=True)
    present = np.flatnonzero(np.bincount(codes, minlength=code_count))
    compact = np.zeros(code_count, dtype=np.intp)
    compact[present] = np.arange(present.size)
    return present, compact[codes]


def _flag_free(derived: pd.DataFrame, allowed: Sequence[str] = ("",)) -> np.ndarray:
    """True where a reading's flags text (missing as "") is one of ``allowed`` (default: no
    flag, ``_clean_flags(derived) == ""``), decided once per distinct flags text instead of once
    per reading (a Python text per reading also held its memory at millions of readings)."""
    if col.FLAGS not in derived:
        return np.full(len(derived), "" in allowed, dtype=bool)
    flags = derived[col.FLAGS]
    if isinstance(flags.dtype, pd.CategoricalDtype):
        codes, texts = flags.cat.codes.to_numpy(), flags.cat.categories
    else:
        codes, texts = pd.factorize(flags, use_na_sentinel=True)
    free = np.array([str(text) in allowed for text in texts] + ["" in allowed])  # last: missing
    return free[np.where(codes < 0, len(texts), codes)]


def findings(derived: pd.DataFrame, machines: Mapping[str, Machine] | MachineFile,
             by_session: bool = False, reference_rh: float = REFERENCE_RH) -> pd.DataFrame:
    """What the readings say about each machine: efficiency, speed fit, humidity effect.

    Parameters
    ----------
    derived : pandas.DataFrame
        Output of :func:`derive`.
    machines : mapping of str to Machine, or MachineFile
        The machines used for :func:`derive`.
    by_session : bool, optional
        One row per machine and session instead of one per machine.
    reference_rh : float, optional
        Relative humidity [-] at which the humidity fit is evaluated, default 0.45.

    Returns
    -------
    pandas.DataFrame
        One row per machine (machines-file order, then ids not in the file) or per machine and
        session (sessions in order of first appearance), columns :data:`FINDINGS_COLUMNS`.
        Only readings without any flag are used (:func:`derive` gives every such reading a
        finite efficiency), so ``readings_used + readings_flagged = readings_total``.
        Efficiencies are fractions; intervals are 95 % and are tuples (low, high), or None where
        the figure could not be computed (its value is then NaN and ``notes`` says why).

        - Speed fit, least squares I = q_rev f + I_0 (``charge_per_rev_nC``,
          ``offset_current_uA``, ``fit_r2``); for a belt whose speed is known only in m/s,
          I = q_m v + I_0 (``charge_per_metre_nC``) and ``charge_per_rev_nC`` is NaN.
        - ``units`` (expected, from the arrangement or N * k) with ``units_rule`` (the rule in
          words) and ``units_basis`` (see :class:`engine.arrangements.UnitRule`), and
          ``observed_units`` = q_rev / (sigma_limit A_rev), or q_m / (sigma_limit
          w) for a belt read in m/s: the fitted charge per revolution over the charge one
          unit carries per revolution, with sigma_limit the mean over the used readings and
          A_rev the charged area of one carrier. Its interval scales the slope's interval
          (sigma_limit and the geometry taken as exact). A machine "delivers observed_units of
          the units its arrangement allows".
        - Humidity fit, least squares efficiency = a + b RH: ``humidity_slope_per_10pct`` is
          b * 0.1 (fraction of efficiency per +10 percentage points of RH), and
          ``efficiency_at_reference_rh`` is a + b * reference_rh with the interval of the
          fitted mean (``humidity_model`` "straight line"). It needs 3 readings and an RH
          spread of at least 5 percentage points. Where the logistic decline below is fitted, the
          efficiency at the reference humidity comes from it instead (``humidity_model``
          "logistic decline"), with a first-order (delta-method) interval from the fit's
          covariance.
        - Logistic decline eta = e_dry / (1 + exp((RH - RH_half) / w)), fitted with
          scipy.optimize.curve_fit only where the data span the drop: at least 10 readings with
          humidity, RH spread of at least 20 percentage points, and the median efficiency of the
          wettest
          quarter of the readings at most half that of the driest quarter. The fit is kept
          when it converges with a finite covariance, e_dry > 0, w > 0 and RH_half within the
          measured RH range.

    Raises
    ------
    InputError
        When ``derived`` lacks the derived columns.
    """
    derived = _check_derived(derived)
    machine_map = _as_mapping(machines)
    if derived.empty:
        return pd.DataFrame({name: pd.Series(dtype=object) for name in FINDINGS_COLUMNS})

    machine_codes, machine_uniques = pd.factorize(derived[col.MACHINE].fillna(""))
    # Machines in machines-file order, then ids not in the file in order of appearance.
    file_order = {machine_id: index for index, machine_id in enumerate(machine_map)}
    rank = np.argsort([file_order.get(value, len(file_order) + index)
                       for index, value in enumerate(machine_uniques)], kind="stable")
    machine_rank = np.empty(len(machine_uniques), dtype=np.intp)
    machine_rank[rank] = np.arange(len(machine_uniques))
    machine_codes = machine_rank[machine_codes]
    machine_ids = [str(machine_uniques[index]) for index in rank]

    if by_session:
        sessions = derived[col.SESSION].fillna("") if col.SESSION in derived else pd.Series(
            "", index=derived.index)
        session_codes, session_uniques = pd.factorize(sessions)
        group_codes = machine_codes * len(session_uniques) + session_codes
        present, group_codes = _compact_codes(group_codes,
                                              len(machine_uniques) * len(session_uniques))
        labels = [(machine_ids[code // len(session_uniques)],
                   str(session_uniques[code % len(session_uniques)])) for code in present]
    else:
        group_codes = machine_codes
        labels = [(machine_id, None) for machine_id in machine_ids]

    clean = _flag_free(derived)
    data = {
        "current": derived[col.CURRENT_A].to_numpy(dtype=float),
        "speed_rev_s": derived[col.SPEED_REV_S].to_numpy(dtype=float)
        if col.SPEED_REV_S in derived else np.full(len(derived), np.nan),
        "belt_speed": derived[col.BELT_SPEED_M_S].to_numpy(dtype=float)
        if col.BELT_SPEED_M_S in derived else np.full(len(derived), np.nan),
        "efficiency": derived[col.EFFICIENCY].to_numpy(dtype=float),
        "efficiency_u": derived[col.EFFICIENCY_U].to_numpy(dtype=float)
        if col.EFFICIENCY_U in derived else np.full(len(derived), np.nan),
        "rh": derived[col.RH].to_numpy(dtype=float)
        if col.RH in derived else np.full(len(derived), np.nan),
        "delta": derived[col.RELATIVE_AIR_DENSITY].to_numpy(dtype=float),
    }
    usable = clean & np.isfinite(data["efficiency"]) & np.isfinite(data["current"])

    rows = []
    for (machine_id, session), positions in zip(
            labels, _group_positions(group_codes, len(labels)), strict=True):
        rows.append(_group_findings(machine_id, session, machine_map.get(machine_id),
                                    positions, data, clean, usable, reference_rh))
    return pd.DataFrame(rows, columns=list(FINDINGS_COLUMNS))


def _empty_findings(machine_id: str, session: str | None, machine: Machine | None) -> dict:
    row: dict[str, object] = {name: math.nan for name in FINDINGS_COLUMNS}
    for name in FINDINGS_COLUMNS:
        if name.endswith("_ci") or "_ci_" in name:
            row[name] = None
    row.update(machine=machine_id, session=session,
               carrier=None if machine is None else machine.kind, speed_fit_on=None,
               units=math.nan if machine is None else machine.units,
               units_rule=None if machine is None else machine.unit_rule.text,
               units_basis=None if machine is None else machine.unit_rule.basis,
               humidity_model=None)
    return row


def _group_findings(machine_id: str, session: str | None, machine: Machine | None,
                    positions: np.ndarray, data: Mapping[str, np.ndarray], clean: np.ndarray,
                    usable: np.ndarray, reference_rh: float) -> dict:
    row = _empty_findings(machine_id, session, machine)
    notes: list[str] = []
    used = positions[usable[positions]]
    row["readings_total"] = int(positions.size)
    row["readings_used"] = int(used.size)
    row["readings_flagged"] = int(positions.size - np.count_nonzero(clean[positions]))
    near_ceiling = int(np.count_nonzero(data["efficiency"][used] > 1.0))
    if near_ceiling:
        notes.append(f"{near_ceiling} reading(s) lie above 100 % but within "
                     f"{COVERAGE_FACTOR:g} standard uncertainties of it (the rule 'within "
                     "uncertainty of the ceiling'): kept in the fits")
    if machine is None:
        notes.append(f"machine '{machine_id}' is not in the machines list: no ceiling")
        row["notes"] = "; ".join(notes)
        return row

    efficiency = data["efficiency"][used]
    if used.size:
        q25, median, q75 = np.percentile(efficiency, [25.0, 50.0, 75.0])
        row.update(efficiency_q25=float(q25), efficiency_median=float(median),
                   efficiency_q75=float(q75))
        uncertainty = data["efficiency_u"][used]
        if np.isfinite(uncertainty).any():
            row["efficiency_u_median"] = float(np.nanmedian(uncertainty))
    if used.size < MIN_READINGS_FOR_FIT:
        notes.append(f"fewer than {MIN_READINGS_FOR_FIT} usable readings ({used.size} of "
                     f"{positions.size}; flagged readings are left out)")
        row["notes"] = "; ".join(notes)
        return row

    _speed_findings(row, notes, machine, used, data)
    _humidity_findings(row, notes, used, data, reference_rh)
    row["notes"] = "; ".join(notes)
    return row


def _speed_findings(row: dict, notes: list[str], machine: Machine, used: np.ndarray,
                    data: Mapping[str, np.ndarray]) -> None:
    current = data["current"][used]
    sigma = float(np.mean(charge_density_limit(machine.breakdown_field_at(data["delta"][used]))))
    row["charge_density_limit_uC_m2"] = sigma * 1e6
    area = machine.carrier.area_per_rev_m2
    if area is not None:
        speed, unit, charged_length = data["speed_rev_s"][used], "rev/s", area
    else:
        # A belt known only by its width: the speed is linear and the fit is per metre.
        speed, unit, charged_length = data["belt_speed"][used], "m/s", machine.carrier.width_m
    row["speed_fit_on"] = unit
    if not _has_spread(speed):
        notes.append(f"no spread in speed (all usable readings at {speed[0]:.4g} {unit}): "
                     "the speed fit needs readings at several speeds")
        return
    fit = fit_line(speed, current)
    if area is not None:
        row["charge_per_rev_nC"] = fit.slope * 1e9
        row["charge_per_rev_ci_nC"] = _scaled(fit.slope_ci, 1e9)
    else:
        row["charge_per_metre_nC"] = fit.slope * 1e9
        row["charge_per_metre_ci_nC"] = _scaled(fit.slope_ci, 1e9)
    row["offset_current_uA"] = fit.intercept * 1e6
    row["offset_current_ci_uA"] = _scaled(fit.intercept_ci, 1e6)
    row["fit_r2"] = fit.r_squared
    per_unit_factor = 1.0 / (sigma * charged_length)
    row["observed_units"] = fit.slope * per_unit_factor
    row["observed_units_ci"] = _scaled(fit.slope_ci, per_unit_factor)


def _humidity_findings(row: dict, notes: list[str], used: np.ndarray,
                       data: Mapping[str, np.ndarray], reference_rh: float) -> None:
    rh_all = data["rh"][used]
    with_rh = np.isfinite(rh_all)
    rh = rh_all[with_rh]
    efficiency = data["efficiency"][used][with_rh]
    if rh.size == 0:
        notes.append("no humidity readings: no humidity fit")
        return
    row["rh_min_pct"] = float(rh.min()) * 100
    row["rh_max_pct"] = float(rh.max()) * 100
    if rh.size < MIN_READINGS_FOR_FIT:
        notes.append(f"fewer than {MIN_READINGS_FOR_FIT} usable readings with humidity: "
                     "no humidity fit")
        return
    span = float(np.ptp(rh))
    if span < MIN_RH_SPAN:
        notes.append(f"RH spans less than {MIN_RH_SPAN * 100:.0f} percentage points "
                     f"({span * 100:.1f}): no humidity fit")
        return
    fit = fit_line(rh, efficiency)
    row["humidity_slope_per_10pct"] = fit.slope * 0.1
    row["humidity_slope_per_10pct_ci"] = _scaled(fit.slope_ci, 0.1)
    value, interval = fit.mean_at(reference_rh)
    row["efficiency_at_reference_rh"] = value
    row["efficiency_at_reference_rh_ci"] = interval
    row["humidity_model"] = "straight line"
    if not rh.min() <= reference_rh <= rh.max():
        notes.append(f"the reference humidity {reference_rh * 100:.0f} % lies outside the "
                     f"measured {rh.min() * 100:.0f} to {rh.max() * 100:.0f} %: the efficiency "
                     "there is an extrapolation")
    _logistic_findings(row, notes, rh, efficiency, span, reference_rh)


def _logistic_findings(row: dict, notes: list[str], rh: np.ndarray, efficiency: np.ndarray,
                       span: float, reference_rh: float) -> None:
    from scipy import optimize
    if rh.size < LOGISTIC_MIN_READINGS:
        notes.append(f"logistic decline not fitted: fewer than {LOGISTIC_MIN_READINGS} "
                     "usable readings with humidity")
        return
    if span < LOGISTIC_MIN_RH_SPAN:
        notes.append(f"logistic decline not fitted: RH spans less than "
                     f"{LOGISTIC_MIN_RH_SPAN * 100:.0f} percentage points")
        return
    dry_limit, wet_limit = np.quantile(rh, [0.25, 0.75])
    dry = float(np.median(efficiency[rh <= dry_limit]))
    wet = float(np.median(efficiency[rh >= wet_limit]))
    if not (dry > 0 and wet <= LOGISTIC_DROP_RATIO * dry):
        notes.append("logistic decline not fitted: the data do not span the drop (the wettest "
                     "quarter of the readings keeps more than half the efficiency of the "
                     "driest quarter)")
        return
    falling = (efficiency > 0.25 * dry) & (efficiency < 0.75 * dry)
    rh_start = float(np.median(rh[falling])) if falling.any() else float(np.median(rh))
    start = (dry, rh_start, span / 10.0)
    try:
        with np.errstate(all="ignore"):
            parameters, covariance = optimize.curve_fit(
                logistic_efficiency, rh, efficiency, p0=start, jac=_logistic_jacobian,
                maxfev=2000)
    except (RuntimeError, ValueError, optimize.OptimizeWarning, np.linalg.LinAlgError) as error:
        notes.append(f"logistic fit failed ({error}); the linear humidity fit stands")
        return
    dry_efficiency, rh_half, width = (float(value) for value in parameters)
    errors = np.sqrt(np.diag(covariance)) if np.all(np.isfinite(covariance)) else None
    if errors is None or not np.all(np.isfinite(errors)):
        notes.append("logistic fit failed (its uncertainty could not be estimated); the linear "
                     "humidity fit stands")
        return
    if not (dry_efficiency > 0 and width > 0 and rh.min() <= rh_half <= rh.max()):
        notes.append("logistic fit rejected: its half-efficiency humidity or its shape lies "
                     "outside what the data show; the linear humidity fit stands")
        return
    half = float(t_critical(rh.size - 3))
    row["logistic_dry_efficiency"] = dry_efficiency
    row["logistic_dry_efficiency_ci"] = (dry_efficiency - half * errors[0],
                                         dry_efficiency + half * errors[0])
    row["logistic_rh_half_pct"] = rh_half * 100
    row["logistic_rh_half_ci_pct"] = ((rh_half - half * errors[1]) * 100,
                                      (rh_half + half * errors[1]) * 100)
    row["logistic_width_pct"] = width * 100
    # The efficiency at the reference humidity from the curve that was fitted, with a
    # first-order interval: var = J C J^T (JCGM 100:2008, clause 5.1.2).
    at_reference = float(logistic_efficiency(reference_rh, *parameters))
    jacobian = _logistic_jacobian(np.array([reference_rh]), *parameters)[0]
    spread = float(np.sqrt(max(float(jacobian @ covariance @ jacobian), 0.0)))
    row["efficiency_at_reference_rh"] = at_reference
    row["efficiency_at_reference_rh_ci"] = (at_reference - half * spread,
                                            at_reference + half * spread)
    row["humidity_model"] = "logistic decline"


# --- findings of whole groups ----------------------------------------------------------------

def group_first_rows(derived: pd.DataFrame) -> pd.DataFrame:
    """Each (machine, session) group of readings and the position of its first reading.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with at least ``machine`` (and ``session``, else all are session "").

    Returns
    -------
    pandas.DataFrame
        Columns ``machine``, ``session`` (missing as "") and ``first`` (0-based position of the
        group's first reading), one row per group present; see :func:`findings_of_groups`.
    """
    machines = derived[col.MACHINE].fillna("") if col.MACHINE in derived else pd.Series(
        "", index=derived.index)
    sessions = derived[col.SESSION].fillna("") if col.SESSION in derived else pd.Series(
        "", index=derived.index)
    machine_codes, machine_uniques = pd.factorize(machines)
    session_codes, session_uniques = pd.factorize(sessions)
    width = max(len(session_uniques), 1)
    codes = machine_codes.astype(np.int64) * width + session_codes
    present, compact = _compact_codes(codes, max(len(machine_uniques), 1) * width)
    # The first position of each group, as np.unique(codes, return_index=True) gives it.
    first = np.full(present.size, codes.size, dtype=np.int64)
    np.minimum.at(first, compact, np.arange(codes.size, dtype=np.int64))
    return pd.DataFrame({
        "machine": [str(machine_uniques[code // width]) for code in present],
        "session": [str(session_uniques[code % width]) for code in present],
        "first": first.astype(np.int64),
    })


def findings_of_groups(by_session: pd.DataFrame, first_rows: pd.DataFrame,
                       machines: Mapping[str, Machine] | MachineFile,
                       machine_ids: Sequence[str], sessions: Sequence[str]) -> pd.DataFrame:
    """The findings per session of the readings of some machines and sessions, from the findings
    of all readings.

    Findings per machine and session use only the readings of their group, so the findings of a
    selection of whole groups are rows of the findings of all readings. This gives exactly
    ``findings(derived[machine in machine_ids and session in sessions], machines,
    by_session=True)`` (same rows, same order, same values) without touching the readings.

    Parameters
    ----------
    by_session : pandas.DataFrame
        ``findings(derived, machines, by_session=True, ...)`` of all the readings.
    first_rows : pandas.DataFrame
        ``group_first_rows(derived)`` of the same readings.
    machines : mapping of str to Machine, or MachineFile
        The machines given to :func:`findings`.
    machine_ids, sessions : sequence of str
        The machines and sessions kept ("" for readings without a session).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`FINDINGS_COLUMNS`; machines in machines-file order, then ids not in the
        file in order of their first reading among those kept; sessions in order of their
        first reading among those kept.
    """
    machine_map = _as_mapping(machines)
    kept = first_rows[first_rows["machine"].isin([str(key) for key in machine_ids])
                      & first_rows["session"].isin([str(name) for name in sessions])]
    if kept.empty:
        return by_session.iloc[0:0].reset_index(drop=True)
    machine_first = kept.groupby("machine")["first"].min()
    session_first = kept.groupby("session")["first"].min()
    file_order = {machine_id: index for index, machine_id in enumerate(machine_map)}
    machine_key = {machine_id: (file_order.get(machine_id, len(file_order)),
                                int(machine_first[machine_id]) if machine_id not in file_order
                                else 0)
                   for machine_id in machine_first.index}
    order = sorted(zip(kept["machine"], kept["session"], strict=True),
                   key=lambda pair: (machine_key[pair[0]], int(session_first[pair[1]])))
    sessions_of = by_session["session"].fillna("").astype(str)
    position = {(str(machine_id), session): index for index, (machine_id, session)
                in enumerate(zip(by_session["machine"].astype(str), sessions_of, strict=True))}
    chosen = by_session.iloc[[position[pair] for pair in order]]
    # Rebuilt from its rows as findings builds its frame, so that each column's dtype is the
    # one the findings of these readings alone would have (a text column that holds only
    # missing values there is object with None, not text with NaN).
    records = chosen.astype(object).to_dict("records")
    texts = [name for name in chosen.columns if pd.api.types.is_string_dtype(chosen[name].dtype)
             and not chosen[name].dtype == object]
    for record in records:
        for name in texts:
            if record[name] is not None and record[name] != record[name]:
                record[name] = None
    return pd.DataFrame(records, columns=list(FINDINGS_COLUMNS))


# --- compare_sessions ------------------------------------------------------------------------

def _round_pair(value: float, half_width: float) -> tuple[str, str]:
    """Round a value and its half-width to the half-width's leading digit (two if it is 1).

    Common practice for quoting an uncertainty, no source.
    """
    if not (math.isfinite(half_width) and half_width > 0):
        return f"{value:.1f}", "0"
    exponent = math.floor(math.log10(half_width))
    leading = half_width / 10**exponent
    digits = 2 if leading < 2 else 1
    decimals = max(0, digits - 1 - exponent)
    return f"{value:.{decimals}f}", f"{half_width:.{decimals}f}"


def compare_sessions(derived: pd.DataFrame, machine_id: str, session_a: str,
                     session_b: str) -> dict[str, object]:
    """Whether session ``session_b`` of a machine delivered more efficiency than ``session_a``.

    Parameters
    ----------
    derived : pandas.DataFrame
        Output of :func:`derive`.
    machine_id : str
        The machine.
    session_a, session_b : str
        The two sessions; differences are b minus a.

    Returns
    -------
    dict
        ``machine``, ``session_a``, ``session_b``, ``n_a``, ``n_b`` (usable readings),
        ``mean_a``, ``mean_b`` (mean efficiency [-]), ``raw_difference`` and
        ``raw_difference_ci`` (Welch, 95 %), ``adjusted_difference`` and
        ``adjusted_difference_ci`` (the session coefficient of the least-squares regression
        efficiency ~ 1 + [session is b] + speed + RH, 95 %; NaN and None when it cannot be
        computed), ``adjusted_for`` (the terms kept, e.g. ["speed", "humidity"]), ``n_adjusted``
        (readings in the regression), ``notes`` (list of str: terms dropped and why),
        ``disjoint_conditions`` (the adjusted-for terms whose ranges in the two sessions do not
        overlap) and ``verdict`` (plain words, differences in percentage points with the 95 %
        half-width; it says when the data cannot tell the machine from the conditions: the
        ranges do not overlap, or the adjusted interval holds both zero and the plain
        difference).

    Raises
    ------
    InputError
        When the machine or a session has no readings, the two sessions are the same, or a
        session has fewer than 2 usable readings.

    Notes
    -----
    A term with no spread over the two sessions (one speed throughout, no humidity log) is
    left out and the notes say so; so is a term that the session fixes (each session at its
    own single speed), since the regression could not tell the two apart. Readings without
    humidity are left out of the adjusted regression only when humidity is a term.
    """
    derived = _check_derived(derived)
    if session_a == session_b:
        raise InputError(f"choose two different sessions to compare; both are '{session_a}'")
    machine_rows = (derived[col.MACHINE] == machine_id).to_numpy()
    if not machine_rows.any():
        known = ", ".join(sorted(map(str, derived[col.MACHINE].dropna().unique()))[:20])
        raise InputError(f"machine '{machine_id}' has no readings; machines with readings: "
                         f"{known or 'none'}")
    sessions = (derived[col.SESSION].fillna("") if col.SESSION in derived
                else pd.Series("", index=derived.index))
    machine_sessions = sessions[machine_rows]
    for name in (session_a, session_b):
        if not (machine_sessions == name).any():
            listed = ", ".join(f"'{value}'" for value in machine_sessions.unique()[:20])
            raise InputError(f"machine '{machine_id}' has no readings in session '{name}'; its "
                             f"sessions are {listed}")

    efficiency = derived[col.EFFICIENCY].to_numpy(dtype=float)
    usable = machine_rows & _flag_free(derived) & np.isfinite(efficiency)
    in_a = usable & (sessions == session_a).to_numpy()
    in_b = usable & (sessions == session_b).to_numpy()
    n_a, n_b = int(in_a.sum()), int(in_b.sum())
    for name, count in ((session_a, n_a), (session_b, n_b)):
        if count < 2:
            raise InputError(f"machine '{machine_id}', session '{name}': {count} usable "
                             "reading(s) without flags; a comparison needs at least 2 per "
                             "session")

    raw, raw_ci = welch_difference(efficiency[in_a], efficiency[in_b])
    both = in_a | in_b
    notes: list[str] = []
    adjusted, adjusted_ci, terms, n_adjusted = _adjusted_difference(derived, both, in_b,
                                                                     efficiency, notes)
    result: dict[str, object] = {
        "machine": machine_id, "session_a": session_a, "session_b": session_b,
        "n_a": n_a, "n_b": n_b,
        "mean_a": float(efficiency[in_a].mean()), "mean_b": float(efficiency[in_b].mean()),
        "raw_difference": raw, "raw_difference_ci": raw_ci,
        "adjusted_difference": adjusted, "adjusted_difference_ci": adjusted_ci,
        "adjusted_for": terms, "n_adjusted": n_adjusted, "notes": notes,
    }
    result["disjoint_conditions"] = _disjoint_conditions(derived, in_a, in_b, terms)
    result["verdict"] = _verdict(session_a, session_b, raw, raw_ci, adjusted, adjusted_ci, terms,
                                 result["disjoint_conditions"])
    return result


def _disjoint_conditions(derived: pd.DataFrame, in_a: np.ndarray, in_b: np.ndarray,
                         terms: Sequence[str]) -> list[str]:
    """The adjusted-for conditions (speed, humidity) whose ranges in the two sessions do not
    overlap: there the adjustment extrapolates from one session into the other."""
    disjoint = []
    for name in terms:
        values = _condition_values(derived, name)
        first, second = values[in_a], values[in_b]
        first, second = first[np.isfinite(first)], second[np.isfinite(second)]
        if first.size and second.size and (first.max() < second.min()
                                           or second.max() < first.min()):
            disjoint.append(name)
    return disjoint


def _condition_values(derived: pd.DataFrame, name: str) -> np.ndarray:
    if name == "humidity":
        return derived[col.RH].to_numpy(dtype=float) if col.RH in derived \
            else np.full(len(derived), np.nan)
    speed = derived[col.SPEED_REV_S].to_numpy(dtype=float) if col.SPEED_REV_S in derived \
        else np.full(len(derived), np.nan)
    if not np.isfinite(speed).any() and col.BELT_SPEED_M_S in derived:
        speed = derived[col.BELT_SPEED_M_S].to_numpy(dtype=float)
    return speed


def _adjusted_difference(derived: pd.DataFrame, rows: np.ndarray, in_b: np.ndarray,
                         efficiency: np.ndarray, notes: list[str]):
    speed = derived[col.SPEED_REV_S].to_numpy(dtype=float) if col.SPEED_REV_S in derived \
        else np.full(len(derived), np.nan)
    if not np.isfinite(speed[rows]).all() and col.BELT_SPEED_M_S in derived:
        speed = derived[col.BELT_SPEED_M_S].to_numpy(dtype=float)
    rh = derived[col.RH].to_numpy(dtype=float) if col.RH in derived \
        else np.full(len(derived), np.nan)

    candidates = {"speed": speed, "humidity": rh}
    kept: dict[str, np.ndarray] = {}
    for name, values in candidates.items():
        finite = np.isfinite(values[rows])
        if not finite.any():
            notes.append(f"no {name} readings: the adjusted difference ignores {name}")
            continue
        if not _has_spread(values[rows][finite]):
            notes.append(f"{name} has no spread over the two sessions: left out of the "
                         "adjusted difference")
            continue
        kept[name] = values
    in_a = rows & ~in_b
    for name in list(kept):
        values = kept[name]
        within_a, within_b = values[in_a], values[in_b]
        within_a, within_b = within_a[np.isfinite(within_a)], within_b[np.isfinite(within_b)]
        if not (_has_spread(within_a) or _has_spread(within_b)):
            notes.append(f"{name} is fixed by the session (each session at one {name}): the "
                         f"regression cannot tell {name} from session, so {name} is left out "
                         "of the adjusted difference")
            del kept[name]
    selected = rows.copy()
    for name, values in kept.items():
        missing = selected & ~np.isfinite(values)
        if missing.any():
            notes.append(f"{int(missing.sum())} reading(s) without {name} left out of the "
                         "adjusted difference")
            selected &= np.isfinite(values)

    names = list(kept)
    while True:
        if int(selected.sum()) <= len(names) + 2 and names:
            dropped = names.pop()
            notes.append(f"too few readings to adjust for {dropped} as well: left out of the "
                         "adjusted difference")
            continue
        design = np.column_stack([np.ones(int(selected.sum())), in_b[selected].astype(float)]
                                 + [kept[name][selected] for name in names])
        try:
            model = fit_linear_model(design, efficiency[selected],
                                     ["intercept", "session", *names])
        except InputError as error:
            if not names:
                notes.append(f"the adjusted difference could not be computed: {error}")
                return math.nan, None, [], int(selected.sum())
            dropped = names.pop()
            notes.append(f"{dropped} moves in step with the other terms: left out of the "
                         "adjusted difference")
            continue
        value, interval = model.coefficient("session")
        return value, interval, names, int(selected.sum())


def _verdict(session_a: str, session_b: str, raw: float, raw_ci, adjusted: float,
             adjusted_ci, terms: Sequence[str], disjoint: Sequence[str] = ()) -> str:
    if adjusted_ci is not None and math.isfinite(adjusted):
        value, interval = adjusted, adjusted_ci
        condition = {
            ("speed", "humidity"): "at the same speed and humidity",
            ("speed",): "at the same speed",
            ("humidity",): "at the same humidity",
        }.get(tuple(terms), "on average, without adjustment for speed or humidity")
    else:
        value, interval = raw, raw_ci
        condition = "on average, without adjustment for speed or humidity"
    half = (interval[1] - interval[0]) / 2
    shown, shown_half = _round_pair(abs(value) * 100, half * 100)
    raw_half = (raw_ci[1] - raw_ci[0]) / 2 if raw_ci is not None else float("nan")
    raw_shown, _ = _round_pair(raw * 100, raw_half * 100) if math.isfinite(raw_half) else (
        f"{raw * 100:+.1f}", "")
    adjusted_used = value is not raw
    caution = ""
    if adjusted_used and disjoint:
        ranges = " and ".join(disjoint)
        caution = (f" The data cannot tell the machine from the conditions: the two sessions' "
                   f"{ranges} ranges do not overlap, so the adjustment extrapolates from one "
                   "session into the other; measure both sessions over a common range to be "
                   "sure.")
    if interval[0] <= 0 <= interval[1]:
        signed, _ = _round_pair(value * 100, half * 100)
        verdict = (f"No clear difference between '{session_b}' and '{session_a}' {condition}: "
                   f"{signed} ± {shown_half} percentage points (95 % interval, it includes zero).")
        raw_is_clear = raw_ci is not None and not (raw_ci[0] <= 0 <= raw_ci[1])
        if adjusted_used and raw_is_clear and not caution:
            if interval[0] <= raw <= interval[1]:
                verdict += (f" The plain difference of {raw_shown} percentage points also lies "
                            "within that interval: the data cannot tell whether it comes from "
                            "the machine or from the sessions' different speed or humidity.")
            else:
                verdict += (f" The plain difference of {raw_shown} percentage points comes from "
                            "the sessions' different speed or humidity, not from the machine.")
        return verdict + caution
    direction = "more" if value > 0 else "less"
    return (f"The '{session_b}' session delivers {shown} ± {shown_half} percentage points "
            f"{direction} efficiency than '{session_a}' {condition} (± is the 95 % interval)."
            + caution)



# --- load line: current against terminal voltage ---------------------------------------------

#: Voltages must span at least this share of the largest terminal voltage for a load line [-].
MIN_VOLTAGE_SPAN_FRACTION = 0.2
#: Significance level of the curvature test of the load line [-].
CURVATURE_ALPHA = 0.05

LOAD_LINE_COLUMNS = (
    "machine", "session", "load_line_readings", "load_line_speed_rev_s",
    "short_circuit_current_uA", "short_circuit_current_ci_uA", "leakage_resistance_GOhm",
    "leakage_resistance_ci_GOhm", "open_circuit_voltage_kV", "open_circuit_voltage_ci_kV",
    "max_output_power_W", "max_output_power_ci_W", "load_line_curvature_p", "load_line_notes",
)
"""Columns of :func:`load_line_findings`, in order."""


@dataclass(frozen=True)
class LoadLine:
    """The load line I = q_rev f + I_0 - V / R_leak of one machine and session (SI units).

    Attributes
    ----------
    readings : int
        Readings used.
    reference_speed_rev_s : float
        Median speed of those readings [rev/s] (NaN where no speed is known); the
        short-circuit current and the open-circuit voltage are given at this speed.
    short_circuit_current_a, short_circuit_current_ci : float, tuple
        Current at zero terminal voltage [A], I_sc = q_rev f_med + I_0, with its interval.
    voltage_slope_a_v : float
        dI/dV = -1 / R_leak [A/V].
    leakage_resistance_ohm, leakage_resistance_ci : float, tuple
        R_leak [Ohm] and its interval (the slope's interval inverted; an upper limit of inf
        when that interval reaches zero). NaN where the current does not fall with voltage.
    open_circuit_voltage_v, open_circuit_voltage_ci : float, tuple
        V_oc = I_sc R_leak [V], where the line reaches zero current, with Fieller's interval
        for a ratio (unbounded, inf, when the slope is not significant).
    max_output_power_w, max_output_power_ci : float, tuple
        Largest V I along the line, I_sc V_oc / 4 [W], at V_oc / 2, with a delta-method
        interval.
    curvature_p : float
        p-value of a quadratic term in V added to the line (NaN when too few readings).
    coefficients : dict of str to float
        The fitted ``intercept`` [A], ``speed`` [C] (q_rev, 0 when speed is constant) and
        ``voltage`` [A/V].
    notes : tuple of str
        What the figures cannot say.
    """

    readings: int
    reference_speed_rev_s: float
    short_circuit_current_a: float
    short_circuit_current_ci: tuple[float, float]
    voltage_slope_a_v: float
    leakage_resistance_ohm: float
    leakage_resistance_ci: tuple[float, float]
    open_circuit_voltage_v: float
    open_circuit_voltage_ci: tuple[float, float]
    max_output_power_w: float
    max_output_power_ci: tuple[float, float]
    curvature_p: float
    coefficients: dict[str, float]
    notes: tuple[str, ...] = ()


def ratio_interval(numerator: float, denominator: float, var_numerator: float,
                     var_denominator: float, covariance: float,
                     t_value: float) -> tuple[float, float]:
    """Fieller's confidence interval for a ratio of two estimates, numerator / denominator.

    Parameters
    ----------
    numerator, denominator : float
        Estimates a and b.
    var_numerator, var_denominator, covariance : float
        var(a), var(b), cov(a, b).
    t_value : float
        Critical value of Student's t for the confidence level.

    Returns
    -------
    tuple of float
        The set of theta with (a - theta b)^2 <= t^2 var(a - theta b); (-inf, inf) when b is not
        significantly different from zero (b^2 <= t^2 var(b)), where the set is unbounded.

    References
    ----------
    E. C. Fieller, Some problems in interval estimation, J. R. Stat. Soc. B 16 (1954) 175-185.
    """
    t2 = t_value**2
    quadratic = denominator**2 - t2 * var_denominator
    if not quadratic > 0:
        return (-math.inf, math.inf)
    linear = numerator * denominator - t2 * covariance
    constant = numerator**2 - t2 * var_numerator
    discriminant = max(linear**2 - quadratic * constant, 0.0)
    root = math.sqrt(discriminant)
    return ((linear - root) / quadratic, (linear + root) / quadratic)


def fit_load_line(current_a, voltage_v, speed_rev_s=None,
                  confidence: float = CONFIDENCE) -> LoadLine:
    """Least-squares load line I = q_rev f + I_0 - V / R_leak with its derived figures.

    Parameters
    ----------
    current_a : array_like
        Measured currents [A].
    voltage_v : array_like
        Terminal voltages at the same readings [V].
    speed_rev_s : array_like, optional
        Speeds [rev/s]. When they vary, speed is a second regressor; when they are constant
        (or not given), q_rev f + I_0 is one constant.
    confidence : float, optional
        Confidence level [-], default 0.95.

    Returns
    -------
    LoadLine
        Every figure NaN (and its interval None-like NaN pair) with a note where the data
        cannot give it: fewer readings than terms plus one, voltages spanning less than
        :data:`MIN_VOLTAGE_SPAN_FRACTION` of the largest, or a current that does not fall
        with voltage (no finite open-circuit voltage).

    Notes
    -----
    OLS with design [1, f, V] (or [1, V]); cov(b) = s^2 (X^T X)^-1. At the median speed
    f_m: I_sc = b_0 + b_f f_m, its variance g^T cov g with g = (1, f_m, 0); R_leak = -1 / b_V,
    whose interval inverts the t interval of b_V; V_oc = I_sc / (-b_V) with Fieller's
    interval (:func:`ratio_interval`); the largest power = I_sc^2 / (4 (-b_V)) = I_sc V_oc / 4 with
    the delta method, var = J cov J^T for J = dP/d(I_sc, -b_V). Curvature: the t test of a
    term (V / V_max)^2 added to the design, significant below p = 0.05.

    References
    ----------
    Montgomery, Peck and Vining, Introduction to Linear Regression Analysis, 5th ed., 2012,
    chapter 3 (OLS and its covariance); Fieller (1954) for the ratio; JCGM 100:2008, clause
    5.1 (first-order propagation, the delta method).
    """
    from scipy import stats  # imported when first needed

    current = np.asarray(current_a, dtype=float)
    voltage = np.asarray(voltage_v, dtype=float)
    speed = (np.full(current.shape, np.nan) if speed_rev_s is None
             else np.asarray(speed_rev_s, dtype=float))
    nan_pair = (math.nan, math.nan)
    finite_speed = speed[np.isfinite(speed)]
    reference_speed = float(np.median(finite_speed)) if finite_speed.size else math.nan
    empty = dict(readings=int(current.size), reference_speed_rev_s=reference_speed,
                 short_circuit_current_a=math.nan, short_circuit_current_ci=nan_pair,
                 voltage_slope_a_v=math.nan, leakage_resistance_ohm=math.nan,
                 leakage_resistance_ci=nan_pair, open_circuit_voltage_v=math.nan,
                 open_circuit_voltage_ci=nan_pair, max_output_power_w=math.nan,
                 max_output_power_ci=nan_pair, curvature_p=math.nan, coefficients={})
    with_speed = finite_speed.size == current.size and _has_spread(speed)
    terms = 3 if with_speed else 2
    if current.size <= terms:
        return LoadLine(**empty, notes=(f"load line: {current.size} readings with a terminal "
                                        f"voltage; the fit needs at least {terms + 1}",))
    largest = float(np.max(np.abs(voltage)))
    span = float(np.ptp(voltage))
    if not (largest > 0 and span >= MIN_VOLTAGE_SPAN_FRACTION * largest):
        return LoadLine(**empty, notes=(
            f"load line: the terminal voltages span too little ({voltage.min() / 1e3:.3g} to "
            f"{voltage.max() / 1e3:.3g} kV; at least {MIN_VOLTAGE_SPAN_FRACTION * 100:.0f} % of "
            "the largest is needed): charge the terminals to several voltages",))
    names = ["intercept"] + (["speed"] if with_speed else []) + ["voltage"]
    design = np.column_stack([np.ones_like(current)] + ([speed] if with_speed else [])
                             + [voltage])
    try:
        model = fit_linear_model(design, current, names, confidence)
    except InputError:
        return LoadLine(**empty, notes=("load line: speed and terminal voltage move together in "
                                        "these readings, so their effects cannot be told apart",))
    coefficients, covariance = model.coefficients, model.covariance
    t_value = float(t_critical(model.degrees_of_freedom, confidence))
    gradient = np.array([1.0, reference_speed, 0.0] if with_speed else [1.0, 0.0])
    short = float(gradient @ coefficients)
    short_var = float(gradient @ covariance @ gradient)
    short_half = t_value * math.sqrt(short_var)
    slope = float(coefficients[-1])
    slope_var = float(covariance[-1, -1])
    slope_ci = (slope - t_value * math.sqrt(slope_var), slope + t_value * math.sqrt(slope_var))
    notes: list[str] = []
    values = dict(empty, short_circuit_current_a=short,
                  short_circuit_current_ci=(short - short_half, short + short_half),
                  voltage_slope_a_v=slope,
                  coefficients={"intercept": float(coefficients[0]),
                                "speed": float(coefficients[1]) if with_speed else 0.0,
                                "voltage": slope})
    # A fall over the whole span below rounding of the currents is no fall at all.
    flat = abs(slope) * span <= 1e-9 * max(float(np.max(np.abs(current))), 1e-300)
    if slope < 0 and not flat:
        falling = -slope  # 1 / R_leak
        values["leakage_resistance_ohm"] = 1.0 / falling
        values["leakage_resistance_ci"] = (-1.0 / slope_ci[0],
                                           -1.0 / slope_ci[1] if slope_ci[1] < 0 else math.inf)
        values["open_circuit_voltage_v"] = short / falling
        # cov(I_sc, -b_V) = -g^T cov[:, V]
        cross = -float(gradient @ covariance[:, -1])
        values["open_circuit_voltage_ci"] = ratio_interval(short, falling, short_var,
                                                             slope_var, cross, t_value)
        power = short**2 / (4.0 * falling)
        jacobian = np.array([short / (2.0 * falling), -(short**2) / (4.0 * falling**2)])
        joint = np.array([[short_var, cross], [cross, slope_var]])
        power_half = t_value * math.sqrt(float(jacobian @ joint @ jacobian))
        values["max_output_power_w"] = power
        values["max_output_power_ci"] = (power - power_half, power + power_half)
        if slope_ci[1] >= 0:
            notes.append("load line: the fall of current with voltage is not significant "
                         "(its 95 % interval reaches zero): the leakage resistance and the "
                         "open-circuit voltage have no finite upper limit")
        if short <= 0:
            notes.append("load line: the short-circuit current is not above zero")
    else:
        notes.append("load line: the current does not fall with terminal voltage (slope "
                     f"{slope * 1e9:+.3g} uA/kV): no finite open-circuit voltage, leakage "
                     "resistance or output-power maximum")
    if current.size > terms + 1:
        curved = np.column_stack([design, (voltage / largest) ** 2])
        try:
            bent = fit_linear_model(curved, current, [*names, "voltage_squared"], confidence)
        except InputError:
            bent = None
        if bent is not None and bent.standard_errors[-1] > 0:
            statistic = bent.coefficients[-1] / bent.standard_errors[-1]
            p_value = float(2.0 * stats.t.sf(abs(statistic), bent.degrees_of_freedom))
            values["curvature_p"] = p_value
            if p_value < CURVATURE_ALPHA:
                notes.append(f"load line: the current bends away from a straight line (quadratic "
                             f"term p = {p_value:.2g}), as corona above some voltage does; the "
                             "straight-line figures are approximate")
    return LoadLine(**values, notes=tuple(notes))


def load_line_findings(derived: pd.DataFrame, by_session: bool = True) -> pd.DataFrame:
    """The load line of every machine (or machine and session) whose readings carry a voltage.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings (``current_a``, ``voltage_v``, ``speed_rev_s``, ``flags``; SI units), for
        example the output of :func:`derive`.
    by_session : bool, optional
        One row per machine and session (default) or one per machine.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`LOAD_LINE_COLUMNS`, one row per group with at least one reading, in
        order of first appearance; ``session`` is None when not by session. Display units: uA,
        GOhm, kV, W; intervals are 95 % (low, high) tuples, with inf where unbounded, or None
        where the figure is NaN. Figures are NaN, with no note, for a group without voltages.
        Readings with flags are left out, except those flagged only ``above_ceiling``.

    See Also
    --------
    fit_load_line : the model and its intervals.
    """
    rows: list[dict[str, object]] = []
    if derived is None or len(derived) == 0:
        return pd.DataFrame({name: pd.Series(dtype=object) for name in LOAD_LINE_COLUMNS})
    count = len(derived)

    def floats(name: str) -> np.ndarray:
        return (derived[name].to_numpy(dtype=float) if name in derived
                else np.full(count, np.nan))

    current, voltage, speed = floats(col.CURRENT_A), floats(col.VOLTAGE_V), floats(
        col.SPEED_REV_S)
    usable = _flag_free(derived, ("", "above_ceiling")) & np.isfinite(current) & np.isfinite(
        voltage)
    machines = derived[col.MACHINE].fillna("").astype(str)
    keys = [machines]
    if by_session:
        keys.append(derived[col.SESSION].fillna("").astype(str) if col.SESSION in derived
                    else pd.Series("", index=derived.index))
    codes, uniques = pd.factorize(pd.MultiIndex.from_arrays(keys) if by_session
                                  else keys[0])
    for index, positions in enumerate(_group_positions(codes, len(uniques))):
        label = uniques[index]
        machine_id, session = (label if by_session else (label, None))
        used = positions[usable[positions]]
        row: dict[str, object] = {name: math.nan for name in LOAD_LINE_COLUMNS}
        row.update(machine=machine_id, session=session, load_line_readings=int(used.size),
                   load_line_notes="")
        for name in LOAD_LINE_COLUMNS:
            if name.endswith("_ci_uA") or "_ci_" in name:
                row[name] = None
        if used.size:
            fit = fit_load_line(current[used], voltage[used], speed[used])
            row.update(_load_line_row(fit))
        rows.append(row)
    return pd.DataFrame(rows, columns=list(LOAD_LINE_COLUMNS))


def _interval_or_none(interval: tuple[float, float], factor: float):
    if any(math.isnan(value) for value in interval):
        return None
    low, high = interval[0] * factor, interval[1] * factor
    return (min(low, high), max(low, high))


def _load_line_row(fit: LoadLine) -> dict[str, object]:
    """A :class:`LoadLine` in the display units of :data:`LOAD_LINE_COLUMNS`."""
    return {
        "load_line_speed_rev_s": fit.reference_speed_rev_s,
        "short_circuit_current_uA": fit.short_circuit_current_a * 1e6,
        "short_circuit_current_ci_uA": _interval_or_none(fit.short_circuit_current_ci, 1e6),
        "leakage_resistance_GOhm": fit.leakage_resistance_ohm / 1e9,
        "leakage_resistance_ci_GOhm": _interval_or_none(fit.leakage_resistance_ci, 1e-9),
        "open_circuit_voltage_kV": fit.open_circuit_voltage_v / 1e3,
        "open_circuit_voltage_ci_kV": _interval_or_none(fit.open_circuit_voltage_ci, 1e-3),
        "max_output_power_W": fit.max_output_power_w,
        "max_output_power_ci_W": _interval_or_none(fit.max_output_power_ci, 1.0),
        "load_line_curvature_p": fit.curvature_p,
        "load_line_notes": "; ".join(fit.notes),
    }
