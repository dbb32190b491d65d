"""Every check has its documentation page, and the SARIF rules point to it."""

from __future__ import annotations

import re

import pytest

from decks import REPO
from pitchguard.deck import LIMIT_DEFAULTS, Exposure, Limits
from pitchguard.judge.checks import CHECKS
from pitchguard.outputs.sarif import sarif_rule

SECTIONS = (
    "What it flags",
    "Why it matters for printing",
    "Example",
    "What to change",
    "Deck options",
    "Known limits",
)


@pytest.mark.parametrize("check", sorted(CHECKS))
def test_each_check_has_a_page_with_every_section(check):
    page = REPO / "rules" / "checks" / f"{check}.md"
    text = page.read_text(encoding="utf-8")
    assert text.startswith(f"# `{check}`\n")
    headings = re.findall(r"^## (.+)$", text, flags=re.M)
    assert headings == list(SECTIONS), headings
    # Deck keys the page names exist in the deck (limits and exposures).
    named = set(re.findall(r"`([a-z0-9_]+_(?:below|pct|nm|lines|steps|checks))`", text))
    known = set(Limits.model_fields) | set(LIMIT_DEFAULTS) | set(Exposure.model_fields)
    assert named <= known, named - known


@pytest.mark.parametrize("check", sorted(CHECKS))
def test_sarif_rule_names_its_page_and_the_page_exists(check):
    rule = sarif_rule(check)
    page = rule["properties"]["documentation"]
    assert (REPO / page).is_file()
    assert page in rule["help"]["text"] and page in rule["help"]["markdown"]


def test_the_index_lists_every_check():
    index = (REPO / "rules" / "checks" / "README.md").read_text(encoding="utf-8")
    for check in CHECKS:
        assert f"({check}.md)" in index, check
