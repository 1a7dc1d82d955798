"""A methods paragraph for a paper, written from the run record: only what this run did.

:func:`methods_text` turns run.json into Markdown: one paragraph in the
order of the analysis (data, model, folds, penalty and pick rules, the
relaxed lasso, nested cross-validation, stability selection, subset
searches, the suggested model, software), each sentence only when the run
did that step, each method cited, and a reference list holding exactly the
works cited. Users paste it and edit it; it is written to ``methods.md`` and
shown in the report.
"""

from __future__ import annotations

from ..defaults import CORRELATION_THRESHOLD

# Citation key -> (in-text form, full reference). Author-year style.
REFERENCES = {
    "lasso": ("Tibshirani 1996", "Tibshirani, R. (1996). Regression shrinkage and selection via "
              "the lasso. Journal of the Royal Statistical Society B, 58, 267-288."),
    "ridge": ("Hoerl & Kennard 1970", "Hoerl, A. E., & Kennard, R. W. (1970). Ridge regression: "
              "biased estimation for nonorthogonal problems. Technometrics, 12, 55-67."),
    "enet": ("Zou & Hastie 2005", "Zou, H., & Hastie, T. (2005). Regularization and variable "
             "selection via the elastic net. Journal of the Royal Statistical Society B, 67, 301-320."),
    "cd": ("Friedman et al. 2010", "Friedman, J., Hastie, T., & Tibshirani, R. (2010). "
           "Regularization paths for generalized linear models via coordinate descent. Journal of "
           "Statistical Software, 33(1), 1-22."),
    "strong": ("Tibshirani et al. 2012", "Tibshirani, R., Bien, J., Friedman, J., Hastie, T., "
               "Simon, N., Taylor, J., & Tibshirani, R. J. (2012). Strong rules for discarding "
               "predictors in lasso-type problems. Journal of the Royal Statistical Society B, 74, "
               "245-266."),
    "esl": ("Hastie et al. 2009", "Hastie, T., Tibshirani, R., & Friedman, J. (2009). The "
            "Elements of Statistical Learning (2nd ed.). Springer."),
    "blocks": ("Roberts et al. 2017", "Roberts, D. R., Bahn, V., Ciuti, S., Boyce, M. S., Elith, "
               "J., Guillera-Arroita, G., ... Dormann, C. F. (2017). Cross-validation strategies for "
               "data with temporal, spatial, hierarchical, or phylogenetic structure. Ecography, 40, "
               "913-929."),
    "relaxed": ("Meinshausen 2007", "Meinshausen, N. (2007). Relaxed lasso. Computational "
                "Statistics & Data Analysis, 52, 374-393."),
    "nested": ("Varma & Simon 2006", "Varma, S., & Simon, R. (2006). Bias in error estimation when "
               "using cross-validation for model selection. BMC Bioinformatics, 7, 91."),
    "stability": ("Meinshausen & Buhlmann 2010", "Meinshausen, N., & Buhlmann, P. (2010). Stability "
                  "selection. Journal of the Royal Statistical Society B, 72, 417-473."),
    "pairs": ("Shah & Samworth 2013", "Shah, R. D., & Samworth, R. J. (2013). Variable selection "
              "with error control: another look at stability selection. Journal of the Royal "
              "Statistical Society B, 75, 55-80."),
    "leaps": ("Furnival & Wilson 1974", "Furnival, G. M., & Wilson, R. W. (1974). Regressions by "
              "leaps and bounds. Technometrics, 16, 499-511."),
    "splicing": ("Zhu et al. 2020", "Zhu, J., Wen, C., Zhu, J., Zhang, H., & Wang, X. (2020). A "
                 "polynomial algorithm for best-subset selection problem. Proceedings of the "
                 "National Academy of Sciences, 117, 33117-33123."),
    "aicc": ("Hurvich & Tsai 1989", "Hurvich, C. M., & Tsai, C.-L. (1989). Regression and time "
             "series model selection in small samples. Biometrika, 76, 297-307."),
    "akaike": ("Burnham & Anderson 2002", "Burnham, K. P., & Anderson, D. R. (2002). Model "
               "Selection and Multimodel Inference (2nd ed.). Springer."),
    "lasso_df": ("Zou et al. 2007", "Zou, H., Hastie, T., & Tibshirani, R. (2007). On the "
                 "\"degrees of freedom\" of the lasso. Annals of Statistics, 35, 2173-2192."),
    "bic": ("Schwarz 1978", "Schwarz, G. (1978). Estimating the dimension of a model. Annals of "
            "Statistics, 6, 461-464."),
    "collinearity": ("Dormann et al. 2013", "Dormann, C. F., Elith, J., Bacher, S., et al. (2013). "
                     "Collinearity: a review of methods to deal with it and a simulation study "
                     "evaluating their performance. Ecography, 36, 27-46."),
    "pooled": ("Hijmans 2012", "Hijmans, R. J. (2012). Cross-validation of species distribution "
               "models: removing spatial sorting bias and calibration with a null model. Ecology, "
               "93, 679-688."),
}

FAMILY_WORDS = {
    "identity": "a linear model (Gaussian errors, identity link)",
    "logit": "a logistic regression (binomial, logit link)",
    "log": "a log-linear count model ({family}, log link)",
}


def _joined(words) -> str:
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]


def _cite(*keys) -> str:
    return "(" + "; ".join(REFERENCES[k][0] for k in keys) + ")"


def _options(record) -> dict:
    return (record or {}).get("options") or {}


def _model_sentence(record) -> tuple[str, list]:
    response = record.get("response") or {}
    family = response.get("family", "")
    link = response.get("link") or "identity"
    what = FAMILY_WORDS.get(link, f"a generalised linear model ({{family}}, {link} link)").format(
        family=str(family).replace("_", " "))
    predictors = record.get("predictors") or {}
    n_pred, n_terms = len(predictors.get("kept") or []), len(predictors.get("terms") or [])
    rows = (record.get("rows") or {}).get("used")
    mixes = [float(m) for m in _options(record).get("mixes") or [1.0]]
    kinds, keys = [], ["cd", "strong"]
    if 1.0 in mixes:
        kinds.append("the lasso")
        keys.insert(0, "lasso")
    if any(0 < m < 1 for m in mixes):
        kinds.append("elastic nets (mix " + ", ".join(f"{m:g}" for m in mixes if 0 < m < 1) + ")")
        keys.insert(0, "enet")
    if 0.0 in mixes:
        kinds.append("ridge regression")
        keys.insert(0, "ridge")
    offset = record.get("offset_rule") or {}
    effort = (f", with the logarithm of survey effort ({offset.get('column')}) as an offset"
              if offset.get("kind") == "effort" else "")
    text = (f"We modelled {response.get('column', 'the response')} at {rows} sites with {what}"
            f"{effort}, on {n_pred} candidate predictors ({n_terms} model terms, each standardised "
            f"to unit variance), and fitted {_joined(kinds)} along a log-spaced grid of penalties "
            f"by coordinate descent with sequential strong rules and a check of the "
            f"Karush-Kuhn-Tucker conditions {_cite(*keys)}.")
    return text, keys


def _folds_sentence(record) -> tuple[str, list]:
    folds = record.get("folds") or {}
    options = _options(record)
    scheme = folds.get("scheme", "random")
    keys = ["esl"]
    words = f"{folds.get('count')} folds ({scheme}"
    if scheme == "spatial blocks" and options.get("block_size"):
        words += f" of {options['block_size']:g} coordinate units"
        keys.append("blocks")
    words += ")"
    if int(folds.get("repeats") or 1) > 1:
        words += f", repeated {folds['repeats']} times"
    metric = options.get("metric", "deviance")
    text = (f"The penalty was chosen by cross-validation over {words}, by the held-out {metric}: "
            f"at its minimum and by the one-standard-error rule {_cite(*keys)}.")
    return text, keys


def methods_text(record: dict, tables: dict | None = None) -> str:
    """The methods paragraph and its references, as Markdown."""
    record = record or {}
    options = _options(record)
    sentences, cited = [], []

    def add(text, keys):
        sentences.append(text)
        cited.extend(k for k in keys if k not in cited)

    add(*_model_sentence(record))
    add(*_folds_sentence(record))
    if options.get("relaxed_lasso", True):
        add("We also cross-validated the relaxed lasso, which blends the lasso with an "
            f"unpenalised refit of the terms it selects {_cite('relaxed')}.", ["relaxed"])
    add("Information criteria (AIC, AICc and BIC) were computed along every path, counting the "
        "non-zero coefficients as the degrees of freedom of the lasso and the trace of the hat "
        "matrix for ridge and elastic nets, and, for a continuous response, the error variance "
        f"as a parameter {_cite('akaike', 'aicc', 'bic', 'lasso_df')}.",
        ["akaike", "aicc", "bic", "lasso_df"])
    stability = record.get("stability")
    if options.get("stability", True) and stability:
        add(f"Stability selection drew {stability.get('n_pairs')} complementary pairs of half "
            f"samples and called a term stable when selected in at least "
            f"{float(stability.get('threshold', 0)):.0%} of them; the expected number of wrongly "
            f"stable terms is at most {float(stability.get('pfer_bound', 0)):.3g} "
            f"{_cite('stability', 'pairs')}.", ["stability", "pairs"])
    if options.get("subsets", True) and tables is not None and tables.get("subsets") is not None:
        found = set(tables["subsets"].get("found_by", []).astype(str)) if "found_by" in \
            tables["subsets"].columns else set()
        ways, keys = [], []
        if "exhaustive" in found:
            ways.append("found by comparing every subset of that size")
        if "proved" in found:
            ways.append(f"proved best by leaps and bounds {_cite('leaps')}")
            keys.append("leaps")
        if "searched" in found:
            ways.append(f"searched by splicing, and not proved best {_cite('splicing')}")
            keys.append("splicing")
        how = _joined(ways) if ways else "searched"
        add(f"The best subset of each size was {how}; subsets were ranked by AICc and BIC with "
            f"Akaike weights, and a stepwise search by AIC was run beside them {_cite('akaike')}.",
            keys + ["akaike"])
    if options.get("nested", True):
        add("Every method and pick rule was graded by nested cross-validation, with the whole "
            "choice redone inside each outer training set, so that the held-out errors are not "
            f"flattered by the choice {_cite('nested')}; the suggested model is the one with "
            "fewest terms whose outer error lies within one standard error of the best.",
            ["nested"])
    folds = record.get("folds") or {}
    if folds.get("scheme") == "spatial blocks" and (record.get("response") or {}).get("presence_absence"):
        add("Discrimination (AUC) was computed over the pooled held-out predictions of all folds "
            f"{_cite('pooled')}.", ["pooled"])
    add(f"Correlated predictors were grouped where |r| >= {CORRELATION_THRESHOLD} "
        f"{_cite('collinearity')}.",
        ["collinearity"])
    versions = record.get("versions") or {}
    software = ", ".join(f"{name} {v}" for name, v in versions.items()
                         if v and name not in ("pathfinder",))
    add(f"Analyses used pathfinder {versions.get('pathfinder', '')} ({software}).", [])
    references = sorted(REFERENCES[k][1] for k in cited)
    return ("## Methods\n\n" + " ".join(sentences) + "\n\n## References\n\n"
            + "\n".join(f"- {r}" for r in references) + "\n")
