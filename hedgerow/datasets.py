"""Demo data (invented scenarios) and the simulation designs used by the checks.

Every ``load_*_demo`` scenario is invented for demos, notebooks and tests: no real
machine, site, company, person or survey stands behind any of them. Each is generated
deterministically from ``random_state`` (nothing is downloaded) and, except the older
``load_orchard_demo``, returns one DataFrame holding the feature columns, the target
column and a ``truth`` column with the noise-free mean, so that any estimate can be
scored against the truth rather than only against noisy held-out rows.

- ``load_pump_demo``: the main scenario. Smooth, saturating response to one operating
  condition, steep at one edge of the data, plus a dozen nuisance sensor columns; the
  local linear correction should help, above all at the edges.
- ``load_step_demo``: a step-shaped truth, flat at both edges; the correction should not
  help (and may cost a little around the steps).
- ``load_bump_demo``: a linear trend with a narrow bump in the middle.
- ``split_demo(frame)``: ``(X, y, truth)`` from any of the frames above.

``make_softplus_design`` is the simulation design of Friedberg, Tibshirani, Athey &
Wager (2021, eq. 1), used by the statistical checks.
"""

from __future__ import annotations

from numbers import Integral

import numpy as np
import pandas as pd
from sklearn.utils import check_random_state

__all__ = [
    "NUISANCE_SENSORS",
    "CoverageDesign",
    "coverage_designs",
    "bump_truth",
    "load_bump_demo",
    "load_orchard_demo",
    "load_pump_demo",
    "load_step_demo",
    "load_trial_demo",
    "make_softplus_design",
    "pump_truth",
    "softplus_truth",
    "split_demo",
    "trial_effect_truth",
    "step_truth",
]

#: The pump scenario's nuisance columns (read by no part of its truth).
NUISANCE_SENSORS = (
    "bearing_temp_c", "casing_temp_c", "vibration_axial_mm_s", "vibration_radial_mm_s",
    "ambient_humidity_pct", "oil_level_pct", "filter_age_days", "line_voltage_v",
    "coolant_flow_lpm", "noise_level_db", "panel_temp_c", "hour_of_shift",
)


def _check_size(n_samples, minimum=20):
    if isinstance(n_samples, bool) or not isinstance(n_samples, Integral) or (
        n_samples < minimum
    ):
        raise ValueError(
            f"The 'n_samples' parameter must be an integer >= {minimum}. "
            f"Got {n_samples!r} instead."
        )
    return int(n_samples)


def _columns(X, names):
    """Return the named columns of a frame, or the leading columns of an array, as floats."""
    if isinstance(X, pd.DataFrame):
        missing = [c for c in names if c not in X.columns]
        if missing:
            raise ValueError(
                f"The 'X' parameter must hold the columns {list(names)}. "
                f"Got a frame without {missing} instead."
            )
        return [X[c].to_numpy(dtype=np.float64) for c in names]
    A = np.asarray(X, dtype=np.float64)
    if A.ndim != 2 or A.shape[1] < len(names):
        raise ValueError(
            f"The 'X' parameter must be a 2-d array whose first columns are {list(names)}. "
            f"Got shape {A.shape} instead."
        )
    return [A[:, j] for j in range(len(names))]


def _frame(columns, target, y, truth):
    frame = pd.DataFrame(columns)
    frame[target] = y
    frame["truth"] = truth
    frame.attrs["target"] = target
    return frame


def split_demo(frame: pd.DataFrame, target: str | None = None):
    """Return ``(X, y, truth)`` of a demo frame: features, target Series, truth Series.

    ``target`` defaults to the name the loader recorded in ``frame.attrs["target"]``.
    """
    if not isinstance(frame, pd.DataFrame) or "truth" not in frame.columns:
        raise ValueError(
            "The 'frame' parameter must be a demo DataFrame with a 'truth' column. "
            f"Got {type(frame).__name__} instead."
        )
    target = frame.attrs.get("target") if target is None else target
    if target not in frame.columns or target == "truth":
        raise ValueError(
            f"The 'target' parameter must name the target column of the frame, one of "
            f"{[c for c in frame.columns if c != 'truth']}. Got {target!r} instead."
        )
    X = frame.drop(columns=[target, "truth"])
    return X, frame[target].rename(target), frame["truth"].rename("truth")


def pump_truth(X) -> np.ndarray:
    """Return the pump scenario's noise-free flow (litres per minute).

    ``flow = 140 * (1 - exp(-(motor_speed_rpm - 600) / 900)) + 0.3 * (inlet_pressure_kpa - 100)``.
    ``X``: a frame with those two columns, or an array whose first two columns they are.
    """
    speed, pressure = _columns(X, ("motor_speed_rpm", "inlet_pressure_kpa"))
    return 140.0 * (1.0 - np.exp(-(speed - 600.0) / 900.0)) + 0.3 * (pressure - 100.0)


def load_pump_demo(n_samples: int = 1000, random_state=0) -> pd.DataFrame:
    """Return an invented test-bench log of a water pump's flow against its motor speed.

    Invented scenario (no real pump, maker or site): each row is one steady-state reading.

    Columns
    -------
    motor_speed_rpm : operating condition, uniform on [600, 3000].
    inlet_pressure_kpa : uniform on [80, 120]; a small linear effect.
    bearing_temp_c ... hour_of_shift : the twelve ``NUISANCE_SENSORS``, drawn
        independently of everything else; the truth reads none of them.
    flow_lpm : the target, ``truth + N(0, 8^2)``.
    truth : ``pump_truth``:
        ``140 * (1 - exp(-(motor_speed_rpm - 600) / 900)) + 0.3 * (inlet_pressure_kpa - 100)``.

    The response saturates: steep at low speed, nearly flat at high speed. At the low
    end a forest's neighbourhoods lie on one side of the query, so its steps bend
    inward (too high there); a local line removes most of that bias.
    """
    n = _check_size(n_samples)
    rng = check_random_state(random_state)
    speed = rng.uniform(600.0, 3000.0, n)
    pressure = rng.uniform(80.0, 120.0, n)
    nuisance = {
        "bearing_temp_c": rng.normal(55.0, 6.0, n),
        "casing_temp_c": rng.normal(38.0, 4.0, n),
        "vibration_axial_mm_s": rng.gamma(3.0, 0.6, n),
        "vibration_radial_mm_s": rng.gamma(3.0, 0.8, n),
        "ambient_humidity_pct": rng.uniform(25.0, 85.0, n),
        "oil_level_pct": rng.uniform(60.0, 100.0, n),
        "filter_age_days": rng.randint(0, 180, n).astype(np.float64),
        "line_voltage_v": rng.normal(400.0, 5.0, n),
        "coolant_flow_lpm": rng.normal(12.0, 1.5, n),
        "noise_level_db": rng.normal(78.0, 3.0, n),
        "panel_temp_c": rng.normal(31.0, 3.0, n),
        "hour_of_shift": rng.randint(0, 8, n).astype(np.float64),
    }
    cols = {"motor_speed_rpm": speed, "inlet_pressure_kpa": pressure, **nuisance}
    truth = pump_truth(pd.DataFrame(cols))
    y = truth + rng.normal(0.0, 8.0, n)
    return _frame(cols, "flow_lpm", y, truth)


#: Where the valve scenario's truth steps, and its three levels (kPa).
STEP_EDGES = (3.5, 6.5)
STEP_LEVELS = (20.0, 35.0, 28.0)


def step_truth(X) -> np.ndarray:
    """Return the valve scenario's noise-free pressure: 20 below dial 3.5, 35 up to 6.5, then 28.

    ``X``: a frame with ``dial_position``, or an array whose first column it is.
    """
    (dial,) = _columns(X, ("dial_position",))
    lo, hi = STEP_EDGES
    return np.where(dial < lo, STEP_LEVELS[0], np.where(dial < hi, STEP_LEVELS[1],
                                                        STEP_LEVELS[2]))


def load_step_demo(n_samples: int = 600, random_state=0) -> pd.DataFrame:
    """Return an invented log of a detent valve's delivered pressure against its dial.

    Invented scenario (no real valve or maker). The valve has three detents, so the
    pressure jumps between flat levels: a shape a forest's steps already fit, and where a
    local line has nothing smooth to add (near a jump it can only blur).

    Columns
    -------
    dial_position : uniform on [0, 10].
    supply_temp_c, hose_length_m, hours_since_service : nuisance columns (not in the truth).
    delivered_kpa : the target, ``truth + N(0, 4^2)``.
    truth : ``step_truth``: 20 for dial < 3.5, 35 for 3.5 <= dial < 6.5, 28 above.
    """
    n = _check_size(n_samples)
    rng = check_random_state(random_state)
    cols = {
        "dial_position": rng.uniform(0.0, 10.0, n),
        "supply_temp_c": rng.normal(18.0, 3.0, n),
        "hose_length_m": rng.uniform(2.0, 12.0, n),
        "hours_since_service": rng.uniform(0.0, 500.0, n),
    }
    truth = step_truth(pd.DataFrame(cols))
    y = truth + rng.normal(0.0, 4.0, n)
    return _frame(cols, "delivered_kpa", y, truth)


def bump_truth(X) -> np.ndarray:
    """Return the dryer scenario's noise-free energy use (kWh per tonne).

    ``energy = 40 + 30 * feed_rate + 12 * exp(-((feed_rate - 0.6) / 0.06)^2 / 2)``.
    ``X``: a frame with ``feed_rate``, or an array whose first column it is.
    """
    (feed,) = _columns(X, ("feed_rate",))
    return 40.0 + 30.0 * feed + 12.0 * np.exp(-0.5 * ((feed - 0.6) / 0.06) ** 2)


def load_bump_demo(n_samples: int = 600, random_state=0) -> pd.DataFrame:
    """Return an invented log of a conveyor dryer's energy use against its feed rate.

    Invented scenario (no real dryer or plant). Energy use rises linearly with the feed
    rate, with a narrow bump near 0.6 (a made-up resonance): a straight trend that local
    lines follow well at both edges, and a feature narrower than most neighbourhoods.

    Columns
    -------
    feed_rate : share of the rated feed, uniform on [0, 1].
    belt_speed_m_min, air_temp_c, grain_moisture_pct : nuisance columns (not in the truth).
    energy_kwh_t : the target, ``truth + N(0, 3^2)``.
    truth : ``bump_truth``: ``40 + 30 * feed_rate + 12 * exp(-((feed_rate - 0.6) / 0.06)^2 / 2)``.
    """
    n = _check_size(n_samples)
    rng = check_random_state(random_state)
    cols = {
        "feed_rate": rng.uniform(0.0, 1.0, n),
        "belt_speed_m_min": rng.uniform(1.0, 4.0, n),
        "air_temp_c": rng.normal(70.0, 5.0, n),
        "grain_moisture_pct": rng.uniform(12.0, 24.0, n),
    }
    truth = bump_truth(pd.DataFrame(cols))
    y = truth + rng.normal(0.0, 3.0, n)
    return _frame(cols, "energy_kwh_t", y, truth)


def load_orchard_demo(
    n_samples: int = 800, random_state: int = 7
) -> tuple[pd.DataFrame, pd.Series]:
    """Return ``(X, y)``: an invented hillside-orchard yield table for demos.

    Columns: ``slope_deg`` (terrain slope), ``sun_hours`` (daily sunshine),
    ``soil_moisture`` (share), ``tree_age`` (years), ``row_spacing_m``. The yield
    ``fruit_kg`` rises smoothly with sunshine and saturates, falls off steeply on the
    steepest ground (an edge of the data where a forest's steps bend inward), and has
    heavy noise. Invented numbers; demos only, never a check value.
    """
    rng = check_random_state(random_state)
    n = int(n_samples)
    slope = rng.uniform(0.0, 35.0, n)
    sun = rng.uniform(3.0, 11.0, n)
    moisture = rng.beta(2.0, 2.5, n)
    age = rng.uniform(2.0, 40.0, n)
    spacing = rng.choice([3.0, 3.5, 4.0, 4.5, 5.0], n)
    mean = (
        40.0 * np.log1p(np.exp(0.9 * (sun - 7.0)))
        - 0.04 * np.maximum(slope - 15.0, 0.0) ** 2
        + 12.0 * moisture
        + 6.0 * np.tanh((age - 10.0) / 8.0)
    )
    y = mean + rng.normal(0.0, 12.0, n)
    X = pd.DataFrame(
        {
            "slope_deg": slope,
            "sun_hours": sun,
            "soil_moisture": moisture,
            "tree_age": age,
            "row_spacing_m": spacing,
        }
    )
    return X, pd.Series(y, name="fruit_kg")


def softplus_truth(X: np.ndarray) -> np.ndarray:
    """Return the true mean log(1 + exp(6 x_1)) of ``make_softplus_design``."""
    return np.logaddexp(0.0, 6.0 * np.asarray(X)[:, 0])


def make_softplus_design(
    n_samples: int = 1000, n_features: int = 20, noise_var: float = 20.0, random_state=None
):
    """Return ``(X, y, mean)``: X ~ U[0,1]^d, y = log(1 + exp(6 X_1)) + N(0, noise_var).

    Friedberg, Tibshirani, Athey & Wager (2021), Local Linear Forests, JCGS 30(2), eq. 1:
    a smooth signal in one column among many noise columns, where a forest's
    piecewise-constant fit is biased at both ends of X_1.
    """
    rng = check_random_state(random_state)
    X = rng.uniform(0.0, 1.0, size=(int(n_samples), int(n_features)))
    mean = softplus_truth(X)
    y = mean + rng.normal(0.0, np.sqrt(noise_var), size=X.shape[0])
    return X, y, mean


# -- a family of smooth designs for the interval checks ----------------------------------
def _design_truth(kind: str, X: np.ndarray) -> np.ndarray:
    X = np.asarray(X, dtype=np.float64)
    x1, x2 = X[:, 0], X[:, 1]
    if kind == "gentle bend":
        return np.sin(2.0 * x1) + 0.5 * x2
    if kind == "strong curvature":
        return 2.0 * np.sin(4.0 * x1) + (x2 - 0.5) ** 2 * 3.0
    if kind == "wide, two curved columns":
        return np.logaddexp(0.0, 5.0 * x1) + 3.0 * (x2 - 0.5) ** 2
    if kind == "correlated normal columns":
        return x1 + 0.4 * x1**2 + np.sin(x2)
    if kind == "skewed columns":
        return 3.0 * np.exp(-2.0 * x1) + 2.0 * x2**2
    if kind == "steep rise at an edge":
        return 4.0 / (1.0 + np.exp(-25.0 * (x1 - 0.9))) + x2
    if kind == "large n, eight columns":
        return np.sin(3.0 * x1) + np.cos(2.0 * x2) + 0.5 * X[:, 2]
    if kind == "interaction, low noise":
        return 2.0 * np.sin(np.pi * x1 * x2) + X[:, 2]
    if kind == "linear":
        return 2.0 * x1 - x2 + 0.5 * X[:, 2]
    raise ValueError(f"Unknown design kind {kind!r}.")


#: (kind, n, d, noise sd, X distribution) of every design of the family.
_DESIGNS = (
    ("gentle bend", 500, 2, 0.5, "uniform"),
    ("strong curvature", 1000, 5, 1.0, "uniform"),
    ("wide, two curved columns", 2000, 20, 1.0, "uniform"),
    ("correlated normal columns", 1000, 6, 1.0, "correlated normal"),
    ("skewed columns", 1500, 4, 0.5, "beta(2, 5)"),
    ("steep rise at an edge", 1000, 3, 0.5, "uniform"),
    ("large n, eight columns", 5000, 8, 1.0, "uniform"),
    ("interaction, low noise", 800, 3, 0.3, "uniform"),
    ("linear", 1000, 4, 1.0, "uniform"),
)


class CoverageDesign:
    """One smooth simulation design: ``sample(random_state)`` -> ``(X, y, mean)``.

    ``truth(X)`` is the noise-free mean (a function of the first three columns at most;
    the other columns are noise). Attributes: ``name``, ``n_samples``, ``n_features``,
    ``noise_sd``, ``columns`` (how X is drawn).
    """

    def __init__(self, name, n_samples, n_features, noise_sd, columns):
        self.name = name
        self.n_samples = int(n_samples)
        self.n_features = int(n_features)
        self.noise_sd = float(noise_sd)
        self.columns = columns

    def __repr__(self):
        return (f"CoverageDesign({self.name!r}, n={self.n_samples}, d={self.n_features}, "
                f"noise sd={self.noise_sd}, X {self.columns})")

    def truth(self, X) -> np.ndarray:
        """Return the noise-free mean at the rows of X."""
        return _design_truth(self.name, X)

    def draw_X(self, rng, n=None) -> np.ndarray:
        n = self.n_samples if n is None else int(n)
        d = self.n_features
        if self.columns == "uniform":
            return rng.uniform(0.0, 1.0, size=(n, d))
        if self.columns == "beta(2, 5)":
            return rng.beta(2.0, 5.0, size=(n, d))
        # equicorrelated normal columns (rho = 0.6), unit variance
        common = rng.normal(size=(n, 1))
        return np.sqrt(0.6) * common + np.sqrt(0.4) * rng.normal(size=(n, d))

    def sample(self, random_state=None, n_samples=None):
        """Return ``(X, y, mean)`` drawn from ``random_state``."""
        rng = check_random_state(random_state)
        X = self.draw_X(rng, n_samples)
        mean = self.truth(X)
        return X, mean + rng.normal(0.0, self.noise_sd, size=X.shape[0]), mean


def coverage_designs(names=None) -> list[CoverageDesign]:
    """Return the seeded family of smooth designs for the interval checks.

    Nine designs vary the curvature, the number of columns (2 to 20), the rows (500 to
    5000), the noise, correlated and non-uniform columns, include one with a steep rise
    at an edge and one linear truth (where a bias correction should cost little width).
    Invented for the checks; every truth is smooth. ``names``: a subset by name.
    """
    out = [CoverageDesign(*spec) for spec in _DESIGNS]
    if names is None:
        return out
    known = {d.name: d for d in out}
    missing = [n for n in names if n not in known]
    if missing:
        raise ValueError(f"The 'names' parameter must list designs of {list(known)}. "
                         f"Got unknown {missing!r} instead.")
    return [known[n] for n in names]


def trial_effect_truth(X) -> np.ndarray:
    """The known effect of the invented field trial: smooth, steep towards the edges.

    tau(x) = 1 + 1.5 tanh(2 x0) + 0.5 x0^3, in yield units per treated plot.
    """
    X = np.asarray(X, dtype=float)
    return 1.0 + 1.5 * np.tanh(2.0 * X[:, 0]) + 0.5 * X[:, 0] ** 3


def load_trial_demo(n_samples: int = 1000, random_state=0, observational=False):
    """Return ``(X, y, treatment, tau)`` of an invented field trial of a soil treatment.

    Invented scenario: plots on a field (columns ``slope`` scaled to [-1, 1], ``moisture``,
    ``shade``) get a soil treatment by coin flip (randomised, propensity 0.5), and the
    effect on yield follows ``trial_effect_truth`` of ``slope``. With ``observational=True``
    the treatment goes preferentially to moist, unshaded plots, which also yield more:
    confounding through two columns (propensity 0.15..0.85, so overlap holds).
    """
    _check_size(n_samples)
    rng = np.random.default_rng(random_state)
    X = rng.uniform(-1.0, 1.0, size=(n_samples, 3))
    if observational:
        e = 1.0 / (1.0 + np.exp(-(1.2 * X[:, 1] - 1.2 * X[:, 2])))
        e = 0.15 + 0.7 * e
    else:
        e = np.full(n_samples, 0.5)
    w = (rng.random(n_samples) < e).astype(float)
    tau = trial_effect_truth(X)
    y = 2.0 * X[:, 1] - 1.5 * X[:, 2] + w * tau + rng.normal(scale=0.5, size=n_samples)
    return X, y, w, tau
