"""Notebook summaries (_repr_html_) of a study, a path and a loaded model, on the demo survey."""

from html.parser import HTMLParser

import pytest

import pathfinder
from pathfinder.examples import DEMO_RESPONSES, load_demo
from pathfinder.outputs.write import model_of
from pathfinder.predict import Model
from pathfinder.report.notebook import MAX_TERMS_SHOWN, show

LEFT_OUT = ["site", "survey_centre", "district", "x_km", "y_km", "minutes_searched",
            "bellmoss_clumps", "turf_growth_mm"]


@pytest.fixture(scope="module")
def study():
    return pathfinder.explore(load_demo(), response=DEMO_RESPONSES["binomial"], exclude=LEFT_OUT,
                              mixes=(1.0,), folds=4, grid_per_decade=5, nested=False,
                              stability=False, subsets=False, relaxed_lasso=False)


class Tags(HTMLParser):
    """Counts opening and closing tags, so unbalanced HTML is caught."""

    def __init__(self):
        super().__init__()
        self.opened, self.closed, self.text = {}, {}, []

    def handle_starttag(self, tag, attrs):
        self.opened[tag] = self.opened.get(tag, 0) + 1

    def handle_endtag(self, tag):
        self.closed[tag] = self.closed.get(tag, 0) + 1

    def handle_data(self, data):
        self.text.append(data)


def parsed(text):
    tags = Tags()
    tags.feed(text)
    for tag in ("div", "table", "tr", "td", "details", "ul"):
        assert tags.opened.get(tag, 0) == tags.closed.get(tag, 0), tag
    assert "script" not in tags.opened     # self-contained: nothing to run, nothing fetched
    return tags, " ".join(tags.text)


def test_study_summary_names_family_rows_picks_and_the_suggested_model(study):
    tags, text = parsed(study._repr_html_())
    assert "bellmoss_found (binomial)" in text
    assert f"{study.survey.n:,}" in text
    picks = study.tables["picks"]
    for penalty in picks["penalty"]:
        assert f"{penalty:.4g}" in text
    chosen = [n for n, b in zip(study.chosen.names, study.chosen.coef) if b != 0]
    assert f"{len(chosen)} terms" in text
    for term in chosen[:MAX_TERMS_SHOWN]:
        assert term in text
    assert "svg" not in tags.opened          # charts only when asked


def test_charts_inline_when_asked(study):
    tags, text = parsed(show(study, charts=True)._repr_html_())
    assert tags.opened.get("svg", 0) == 2    # the CV curves and the chosen model (no nested run)
    assert "not drawn" not in text


def test_path_summary():
    frame = load_demo()
    path = pathfinder.fit_path(frame[["elevation_m", "soil_ph", "wetness_index"]],
                               frame[DEMO_RESPONSES["binomial"]], family="binomial", per_decade=5)
    tags, text = parsed(path._repr_html_())
    assert f"{len(path.penalties)} penalties" in text
    assert f"{path.penalties[-1]:.4g}" in text and "soil_ph" in text
    assert "binomial" in text and path.stop_reason in text
    chart_tags, _ = parsed(show(path)._repr_html_())
    assert chart_tags.opened.get("svg", 0) == 1


def test_model_summary(study):
    model = Model(model_of(study))
    _, text = parsed(model._repr_html_())
    used = [t.name for t in model.active_terms]
    assert f"{len(used)} terms" in text
    for name in used:
        assert name in text
    assert "binomial" in text and "bellmoss_found" in text


def test_show_refuses_other_things():
    with pytest.raises(pathfinder.InputError, match="a study, a path or a loaded model"):
        show(42)
