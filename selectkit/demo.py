"""The bundled demo: invented greenhouse data generated from a known model.

A greenhouse operator records, for each growing bay and season, the tomato
yield (kg/m²) and about thirty bay measurements.  The data are **invented**:
they are drawn from the model below with a fixed seed, so the demo can show
whether a search recovers the truth and how sure it is.

True model (``TRUE_TERMS``)::

    yield_kg_m2 = 6 + 5.5·log(light_mol_m2_day) + 0.15·sqrt(co2_above_ambient_ppm)
                  + 0.45·night_temp_c − 10/plant_density_m2
                  + cultivar effect (Ruby 0, Amber +1.6, Garnet −1.1) + ε,   ε ~ N(0, 0.9²)

Everything else is a decoy: a second light sensor that tracks the first
(r ≈ 0.97), day temperature that follows night temperature, irrigation that
follows light, a CO₂ set-point that is an exact shift of the CO₂ excess (intake
reports it as collinear), bay and sensor identifiers, and six auxiliary
probe readings of pure noise.  Four bays carry outlying yields (a pest
outbreak in the story): the normality check calls the residuals' shape a
problem and names the bays far off the fit.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

__all__ = ["RESPONSE", "TRUE_TERMS", "TRUE_INTERCEPT", "TRUE_COEFFICIENTS", "TRUE_EQUATION", "SEED", "make_greenhouse", "demo_csv_path", "Recovery", "recovery"]

RESPONSE = "yield_kg_m2"
#: Readable names of the terms of the generating model.
TRUE_TERMS = (
    "log(light_mol_m2_day)",
    "sqrt(co2_above_ambient_ppm)",
    "night_temp_c",
    "1/plant_density_m2",
    "cultivar",
)
#: Coefficients of the generating model, by term (a categorical by level; its first level is the baseline).
TRUE_INTERCEPT = 6.0
TRUE_COEFFICIENTS = {
    "log(light_mol_m2_day)": 5.5,
    "sqrt(co2_above_ambient_ppm)": 0.15,
    "night_temp_c": 0.45,
    "1/plant_density_m2": -10.0,
    "cultivar": {"Ruby": 0.0, "Amber": 1.6, "Garnet": -1.1},
}
NOISE_SD = 0.9
#: The generating model written as an equation, for a person to read.
TRUE_EQUATION = (
    f"{RESPONSE} = {TRUE_INTERCEPT:g}"
    + "".join(f" {'-' if value < 0 else '+'} "
              + (f"{abs(value):g}/{term[2:]}" if term.startswith("1/") else f"{abs(value):g}*{term}")
              for term, value in TRUE_COEFFICIENTS.items() if not isinstance(value, dict))
    + " + cultivar effect ("
    + ", ".join(f"{level} {value:+g}" if value else f"{level} 0" for level, value in TRUE_COEFFICIENTS["cultivar"].items())
    + f") + noise of sd {NOISE_SD:g}"
)
SEED = 20261202
N_ROWS = 300


def make_greenhouse(n_rows: int = N_ROWS, seed: int = SEED) -> pd.DataFrame:
    """Generate the invented greenhouse table.

    Parameters
    ----------
    n_rows : int, default 300
        Number of bay-seasons.
    seed : int
        Seed of the numpy Generator; the bundled CSV uses the default.

    Returns
    -------
    DataFrame
        One row per bay-season, the response ``yield_kg_m2`` first.

    Examples
    --------
    >>> frame = make_greenhouse(50)
    >>> frame.shape[0]
    50
    """
    rng = np.random.default_rng(seed)
    n = int(n_rows)
    light = rng.uniform(8.0, 30.0, n)
    co2_above = np.round(rng.uniform(0.0, 700.0, n) * (rng.random(n) > 0.08), 0)  # some bays unenriched: zeros
    night_temp = rng.uniform(12.0, 22.0, n)
    density = rng.uniform(1.5, 4.5, n)
    cultivar = rng.choice(np.array(["Ruby", "Amber", "Garnet"]), size=n, p=[0.45, 0.35, 0.20])
    levels = TRUE_COEFFICIENTS["cultivar"]
    cultivar_effect = np.select([cultivar == level for level in levels], list(levels.values()), 0.0)

    noise = rng.normal(0.0, NOISE_SD, n)
    c = TRUE_COEFFICIENTS
    y = (
        TRUE_INTERCEPT
        + c["log(light_mol_m2_day)"] * np.log(light)
        + c["sqrt(co2_above_ambient_ppm)"] * np.sqrt(co2_above)
        + c["night_temp_c"] * night_temp
        + c["1/plant_density_m2"] / density
        + cultivar_effect
        + noise
    )
    outliers = rng.choice(n, size=4, replace=False)
    y[outliers] -= rng.uniform(6.0, 9.0, 4)  # pest outbreak in four bays

    frame = pd.DataFrame(
        {
            RESPONSE: np.round(y, 3),
            "bay_id": [f"bay-{i + 1:03d}" for i in range(n)],
            "light_mol_m2_day": np.round(light, 3),
            "light_backup_sensor": np.round(light * rng.normal(1.0, 0.05, n) + rng.normal(0, 0.5, n), 3),
            "co2_above_ambient_ppm": co2_above,
            "co2_setpoint_ppm": co2_above + 420.0,
            "night_temp_c": np.round(night_temp, 2),
            "day_temp_c": np.round(night_temp + 6.0 + rng.normal(0.0, 0.8, n), 2),
            "vapour_deficit_kpa": np.round(rng.uniform(0.3, 1.5, n), 3),
            "irrigation_l_m2_day": np.round(1.0 + 0.15 * light + rng.normal(0.0, 0.6, n), 3),
            "nutrient_ec_ms_cm": np.round(rng.uniform(2.0, 5.0, n), 2),
            "plant_density_m2": np.round(density, 3),
            "bay_age_years": rng.integers(1, 26, n).astype(float),
            "heating_pipe_distance_m": np.round(rng.uniform(0.5, 6.0, n), 2),
            "cultivar": cultivar,
            "sensor_serial": rng.permutation(np.arange(10_000, 10_000 + n)),
        }
    )
    for j in range(1, 7):
        frame[f"aux_probe_{j:02d}"] = np.round(rng.normal(50.0, 10.0, n), 3)
    return frame


def demo_csv_path() -> Path | None:
    """Path of the bundled CSV when running from a source checkout, else None."""
    path = Path(__file__).resolve().parent.parent / "demo" / "greenhouse.csv"
    return path if path.is_file() else None


@dataclass(frozen=True)
class Recovery:
    """How a search's shortlist compares with the generating model.

    Attributes
    ----------
    missing_variables, extra_variables : tuple of str
        Generating variables the top answer lacks, and variables it holds that the generating model does not.
    forms_offered : bool
        Whether every generating form is the top answer's best form or one of its forms within Δ ≤ 2.
    forms_not_offered : tuple of str
        Generating forms that are neither.
    best_is_truth : bool
        Whether the best model is exactly the generating model.
    model_position : int or None
        Position (1 = best) of the generating model in the model-level list, None when it is not listed.
    """

    missing_variables: tuple[str, ...]
    extra_variables: tuple[str, ...]
    forms_offered: bool
    forms_not_offered: tuple[str, ...]
    best_is_truth: bool
    model_position: int | None


def recovery(result) -> Recovery:
    """Compare the top answer of a :class:`selectkit.Result` on the demo data with the generating model."""
    cands = result.candidates
    family = {t.name: t.family for t in cands.terms}
    truth_variables = {family.get(t, t) for t in TRUE_TERMS}
    best = set(result.terms(0))
    top_variables = {family[t] for t in best}
    offered = set(best)
    for _, forms in result.ranking.answer_forms[0]:
        offered.update(forms)
    not_offered = tuple(t for t in TRUE_TERMS if t not in offered)
    position = None
    for i, terms in enumerate(result.models["terms"]):
        if set(str(terms).split(" + ")) == set(TRUE_TERMS):
            position = i + 1
            break
    return Recovery(
        missing_variables=tuple(sorted(truth_variables - top_variables)),
        extra_variables=tuple(sorted(top_variables - truth_variables)),
        forms_offered=not not_offered,
        forms_not_offered=not_offered,
        best_is_truth=best == set(TRUE_TERMS),
        model_position=position,
    )
