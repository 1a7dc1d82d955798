"""The hypothesis profiles: CI draws the same examples every run, local runs draw new ones."""

from hypothesis import settings

from . import conftest


def test_ci_is_derandomised_and_local_runs_draw_new_examples(monkeypatch):
    monkeypatch.delenv("HYPOTHESIS_PROFILE", raising=False)
    monkeypatch.setenv("CI", "true")
    assert conftest._profile() == "ci"
    assert settings.get_profile("ci").derandomize is True
    monkeypatch.delenv("CI")
    assert conftest._profile() == "local"
    local = settings.get_profile("local")
    assert local.derandomize is False
    assert local.max_examples > settings.get_profile("ci").max_examples
    monkeypatch.setenv("HYPOTHESIS_PROFILE", "ci")
    assert conftest._profile() == "ci"


def test_the_ci_script_asks_for_the_ci_profile():
    from pathlib import Path
    script = (Path(__file__).resolve().parents[1] / ".ci" / "run").read_text(encoding="utf-8")
    before_tests = script.split("python -m pytest")[0]
    assert "export CI=true" in before_tests
