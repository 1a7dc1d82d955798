"""Shared pieces for the report tests: a small real run, and invented tables.

The small run goes through the whole pipeline (explore, write_study) on an
invented survey. The tables that other parts of pathfinder add later
(stability, subsets, sites, response curves, ...) are invented here with the
documented columns, only to exercise the renderer; their numbers mean nothing.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from pathfinder.outputs.write import write_csv, write_study
from pathfinder.study import StudyOptions, explore


def invented_survey(n: int = 180, seed: int = 7) -> pd.DataFrame:
    """Sites with correlated covariates, a factor, coordinates and a presence/absence response."""
    rng = np.random.default_rng(seed)
    east, north = rng.uniform(0, 50, n), rng.uniform(0, 30, n)
    elevation = 200 + 8 * north + rng.normal(0, 40, n)
    temp = 14 - 0.006 * elevation + rng.normal(0, 0.4, n)
    rain = 900 + 0.8 * elevation + rng.normal(0, 90, n)
    soil_ph = rng.normal(5.5, 0.8, n)
    shrub = np.clip(rng.normal(30, 12, n), 0, 100)
    rock = rng.choice(["granite", "shale", "limestone"], n)
    eta = 1.4 * (temp - temp.mean()) / temp.std() - 0.9 * (soil_ph - 5.5) / 0.8 + 0.5 * (rock == "shale")
    present = (rng.uniform(size=n) < 1 / (1 + np.exp(-eta))).astype(int)
    return pd.DataFrame({"site": np.arange(1, n + 1), "east": east, "north": north,
                         "elevation_m": elevation, "july_temp_c": temp, "rain_mm": rain,
                         "soil_ph": soil_ph, "shrub_cover_pct": shrub, "rock": rock,
                         "present": present})


def small_run(folder: Path, survey: pd.DataFrame | None = None) -> Path:
    """explore + write_study on the invented survey into ``folder``; returns the folder."""
    survey = invented_survey() if survey is None else survey
    options = StudyOptions(response="present", family="binomial", exclude=("site",),
                           coords=("east", "north"), folds=3, inner_folds=3, mixes=(1.0, 0.5),
                           grid_per_decade=6, seed=3)
    study = explore(survey, options)
    return write_study(study, folder)


def _terms(folder: Path) -> list:
    return json.loads((Path(folder) / "run.json").read_text())["predictors"]["terms"]


def invented_tables(folder: Path, survey: pd.DataFrame | None = None, seed: int = 11) -> dict:
    """The tables a later run will also write, invented with their documented columns."""
    survey = invented_survey() if survey is None else survey
    rng = np.random.default_rng(seed)
    terms = _terms(folder)
    p = len(terms)
    cluster = [1 if t in ("elevation_m", "july_temp_c", "rain_mm") else i + 2 for i, t in enumerate(terms)]
    frequency = np.round(rng.uniform(0, 1, p), 3)
    stability = pd.DataFrame({"term": terms, "selection_frequency": frequency, "stable": frequency >= 0.7,
                              "cluster": cluster,
                              "cluster_frequency": [max(frequency[[j for j in range(p) if cluster[j] == c]])
                                                    for c in cluster],
                              "group": terms, "group_frequency": frequency})
    penalties = np.geomspace(0.3, 0.003, 25)
    stability_path = pd.DataFrame([
        {"term": t, "penalty": lam, "frequency": float(np.clip(f * (1 - lam / 0.3) * 1.2, 0, 1))}
        for t, f in zip(terms, frequency) for lam in penalties])
    models = [
        ";".join(sorted(rng.choice(terms, size=rng.integers(1, p + 1), replace=False))) for _ in range(30)
    ]
    models = list(dict.fromkeys(models))
    aicc = 200 + rng.gamma(2.0, 3.0, len(models))
    delta = aicc - aicc.min()
    weight = np.exp(-delta / 2) / np.exp(-delta / 2).sum()
    subsets = pd.DataFrame(
        {
            "terms": models,
            "k": [m.count(";") + 2 for m in models],
            "log_likelihood": -aicc / 2 + 3,
            "aic": aicc - 1,
            "aicc": aicc,
            "bic": aicc + 9,
            "delta": delta,
            "weight": weight,
        }
    )
    importance = pd.DataFrame(
        {
            "term": terms,
            "importance": [float(weight[[t in m.split(";") for m in models]].sum()) for t in terms],
        }
    )
    vif = pd.DataFrame({"term": terms, "vif": np.round(1 + rng.gamma(1.5, 3.0, p), 2), "cluster": cluster})
    vif.loc[0, "vif"] = np.inf
    folds = pd.read_csv(Path(folder) / "folds.csv")
    used = survey.iloc[folds["row"] - 1]
    fitted = np.clip(used["present"].mean() + rng.normal(0, 0.2, len(used)), 0.01, 0.99)
    sites = pd.DataFrame(
        {
            "row": folds["row"],
            "x": used["east"].to_numpy(),
            "y": used["north"].to_numpy(),
            "fold": folds["fold"],
            "observed": used["present"].to_numpy(),
            "fitted": fitted,
            "held_out": np.clip(fitted + rng.normal(0, 0.05, len(used)), 0.01, 0.99),
        }
    )
    chosen_terms = ["july_temp_c", "soil_ph", "rock=shale"]
    chosen_terms = [t for t in chosen_terms if t in terms] or terms[:2]
    estimates = rng.normal(0, 1, len(chosen_terms))
    chosen = pd.DataFrame(
        {
            "term": chosen_terms,
            "estimate": estimates / 2,
            "estimate_std": estimates,
            "selection_frequency": rng.uniform(0.5, 1, len(chosen_terms)),
        }
    )
    curves, rugs = [], []
    for term in [t for t in chosen_terms if t in survey.columns]:
        values = np.linspace(survey[term].min(), survey[term].max(), 40)
        centre = 1 / (1 + np.exp(-(values - values.mean()) / values.std()))
        curves.append(
            pd.DataFrame(
                {
                    "term": term,
                    "value": values,
                    "fitted": centre,
                    "lower": np.clip(centre - 0.1, 0, 1),
                    "upper": np.clip(centre + 0.1, 0, 1),
                }
            )
        )
        rugs.append(pd.DataFrame({"term": term, "value": used[term].to_numpy()}))
    return {
        "stability": stability,
        "stability_path": stability_path,
        "subsets": subsets,
        "importance": importance,
        "vif": vif,
        "sites": sites,
        "response_curves": pd.concat(curves, ignore_index=True),
        "rug": pd.concat(rugs, ignore_index=True),
        "chosen": chosen,
    }


#: Tables that stages after the penalised paths write (stability, subsets, the chosen model).
LATER_TABLES = (
    "stability",
    "stability_path",
    "subsets",
    "stepwise",
    "importance",
    "vif",
    "sites",
    "response_curves",
    "rug",
    "chosen",
)


def add_invented_tables(folder: Path, survey: pd.DataFrame | None = None) -> list:
    """Write invented versions of the later tables the run did not write; return their names.

    run.json gets a stability entry when it has none.
    """
    added = []
    for name, frame in invented_tables(folder, survey).items():
        if not (Path(folder) / f"{name}.csv").exists():
            write_csv(frame, Path(folder) / f"{name}.csv")
            added.append(name)
    record_path = Path(folder) / "run.json"
    record = json.loads(record_path.read_text())
    record.setdefault("stability", {"q": 3.2, "threshold": 0.7, "pfer_bound": 0.95, "n_pairs": 50})
    record_path.write_text(json.dumps(record, indent=2))
    return added


def remove_later_tables(folder: Path) -> None:
    """Take the later tables (and their run.json entries) out of ``folder``: a run of the paths only."""
    for name in LATER_TABLES:
        (Path(folder) / f"{name}.csv").unlink(missing_ok=True)
    record_path = Path(folder) / "run.json"
    record = json.loads(record_path.read_text())
    for key in ("stability", "chosen"):
        record.pop(key, None)
    record_path.write_text(json.dumps(record, indent=2))


def large_tables(n_sites: int = 10_000, n_terms: int = 200, n_steps: int = 100, seed: int = 5) -> tuple:
    """Invented tables of a large run (the report's size goal): (tables, record)."""
    rng = np.random.default_rng(seed)
    terms = [f"covariate_{j:03d}_units" for j in range(n_terms)]
    methods = [
        ("lasso", 1.0),
        ("elastic net", 0.75),
        ("elastic net", 0.5),
        ("elastic net", 0.25),
        ("ridge", 0.0),
    ]
    coef, path, cv, picks = [], [], [], []
    entry = rng.integers(0, n_steps, n_terms)
    size = rng.normal(0, 1, n_terms)
    for method, mix in methods:
        penalties = np.geomspace(1.0, 1e-4, n_steps) * (1 + 10 * (1 - mix))
        grow = np.clip((np.arange(n_steps)[:, None] - (entry[None, :] if mix > 0 else -1)) / n_steps, 0, None)
        est = grow * size[None, :]
        steps = np.repeat(np.arange(n_steps), n_terms)
        coef.append(
            pd.DataFrame(
                {
                    "method": method,
                    "mix": mix,
                    "step": steps,
                    "penalty": np.repeat(penalties, n_terms),
                    "term": np.tile(terms, n_steps),
                    "estimate": est.ravel() / 3,
                    "estimate_std": est.ravel(),
                }
            )
        )
        n_active = (est != 0).sum(axis=1)
        path.append(
            pd.DataFrame(
                {
                    "method": method,
                    "mix": mix,
                    "step": np.arange(n_steps),
                    "penalty": penalties,
                    "n_terms": n_active,
                    "deviance": 1000 - np.arange(n_steps),
                    "deviance_explained": np.linspace(0, 0.5, n_steps),
                    "intercept": 0.1,
                }
            )
        )
        curve = 1 + (np.arange(n_steps) - 60) ** 2 / 4000
        cv.append(
            pd.DataFrame(
                {
                    "method": method,
                    "mix": mix,
                    "step": np.arange(n_steps),
                    "penalty": penalties,
                    "n_terms": n_active,
                    "metric": "deviance",
                    "cv_mean": curve,
                    "cv_se": 0.05,
                    "train_mean": curve - np.arange(n_steps) / 300,
                    "relaxation": np.nan,
                }
            )
        )
        for rule, step in (("min", 60), ("one_se", 45)):
            picks.append(
                {
                    "method": method,
                    "mix": mix,
                    "rule": rule,
                    "step": step,
                    "penalty": penalties[step],
                    "n_terms": int(n_active[step]),
                    "cv_mean": curve[step],
                    "cv_se": 0.05,
                    "terms": ";".join(t for t, e in zip(terms, est[step]) if e != 0),
                    "relaxation": np.nan,
                }
            )
    a, b = np.triu_indices(n_terms, k=1)
    correlations = pd.DataFrame(
        {
            "term_a": np.asarray(terms)[a],
            "term_b": np.asarray(terms)[b],
            "r": np.tanh(rng.normal(0, 0.4, len(a))),
        }
    )
    sites = pd.DataFrame(
        {
            "row": np.arange(1, n_sites + 1),
            "x": rng.uniform(400000, 480000, n_sites),
            "y": rng.uniform(6100000, 6150000, n_sites),
            "fold": rng.integers(1, 11, n_sites),
            "observed": rng.integers(0, 2, n_sites),
            "fitted": rng.uniform(0, 1, n_sites),
            "held_out": rng.uniform(0, 1, n_sites),
        }
    )
    frequency = rng.uniform(0, 1, n_terms)
    tables = {
        "coefficients": pd.concat(coef, ignore_index=True),
        "path": pd.concat(path, ignore_index=True),
        "cv": pd.concat(cv, ignore_index=True),
        "picks": pd.DataFrame(picks),
        "correlations": correlations,
        "sites": sites,
        "stability": pd.DataFrame(
            {
                "term": terms,
                "selection_frequency": frequency,
                "stable": frequency > 0.8,
                "cluster": rng.integers(1, 60, n_terms),
            }
        ),
        "stability_path": pd.DataFrame(
            {
                "term": np.repeat(terms, n_steps),
                "penalty": np.tile(np.geomspace(1, 1e-3, n_steps), n_terms),
                "frequency": rng.uniform(0, 1, n_terms * n_steps),
            }
        ),
        "vif": pd.DataFrame(
            {"term": terms, "vif": rng.gamma(2, 3, n_terms), "cluster": rng.integers(1, 60, n_terms)}
        ),
        "rug": pd.DataFrame(
            {"term": np.repeat(terms[:10], n_sites), "value": rng.normal(0, 1, 10 * n_sites)}
        ),
        "response_curves": pd.DataFrame(
            {
                "term": np.repeat(terms[:10], 50),
                "value": np.tile(np.linspace(-3, 3, 50), 10),
                "fitted": rng.uniform(0, 1, 500),
            }
        ),
    }
    record = {
        "response": {"column": "present", "family": "binomial"},
        "options": {"metric": "deviance"},
        "rows": {"read": n_sites, "used": n_sites, "dropped": 0},
        "predictors": {"kept": terms, "categorical": [], "terms": terms, "dropped": []},
    }
    return tables, record
