"""methods.md: only what the run did, every citation in the list and nothing else there.

The check is of our own rule (issue: a methods paragraph ready for a paper);
the run record comes from small invented runs (tests/report/__init__.py).
"""

import re

import pytest

from pathfinder.report.methods import REFERENCES, methods_text
from pathfinder.report.html import read_record, read_tables

from . import small_run


def _cited(text):
    body = text.split("## References")[0]
    return set(re.findall(r"\(([^()]*\d{4}[^()]*)\)", body))


def _consistent(text):
    body, refs = text.split("## References")
    listed = [line[2:] for line in refs.strip().splitlines() if line.startswith("- ")]
    cited = set()
    for group in re.findall(r"\(([A-Z][^()]*?\d{4}(?:; [^()]*?\d{4})*)\)", body):
        cited.update(part.strip() for part in group.split(";"))
    by_short = {short: full for short, full in REFERENCES.values()}
    assert cited, "no citation found"
    for short in cited:
        assert short in by_short, short
        assert by_short[short] in listed, short
    assert len(listed) == len(cited)        # nothing listed that is not cited
    return cited


@pytest.fixture(scope="module")
def full_run(tmp_path_factory):
    folder = small_run(tmp_path_factory.mktemp("full"))
    return read_record(folder), read_tables(folder)


def test_every_reference_cited_is_listed_and_every_listed_one_is_cited(full_run):
    record, tables = full_run
    text = methods_text(record, tables)
    cited = _consistent(text)
    assert {"Meinshausen & Buhlmann 2010", "Varma & Simon 2006", "Meinshausen 2007"} <= cited


@pytest.mark.parametrize("skip, gone", [
    ("stability", "Meinshausen & Buhlmann 2010"),
    ("nested", "Varma & Simon 2006"),
    ("relaxed_lasso", "Meinshausen 2007"),
])
def test_a_step_the_run_skipped_leaves_no_sentence_and_no_reference(full_run, skip, gone):
    record, tables = full_run
    record = {**record, "options": {**record["options"], skip: False}}
    if skip == "stability":
        record["stability"] = None
    text = methods_text(record, tables)
    assert gone not in text
    _consistent(text)


def test_without_a_subset_search_no_subset_sentence(full_run):
    record, tables = full_run
    record = {**record, "options": {**record["options"], "subsets": False}}
    text = methods_text(record, {k: v for k, v in tables.items() if k != "subsets"})
    assert "best subset" not in text and "Akaike weights" not in text
    _consistent(text)
