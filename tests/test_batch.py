"""Batch helpers: unique report names and the one-line method of the index and the summary."""
from pathlib import Path

from optimiser.batch import _unique_bases, method_text
from optimiser.search import Candidate


def test_report_names_are_unique_within_a_batch():
    paths = [Path("a/water.yaml"), Path("b/water.yaml"), Path("c/water.yml"), Path("d/bath 1.yaml")]
    assert _unique_bases(paths) == ["water", "water-2", "water-3", "bath_1"]


def test_method_line_names_the_standard_only_where_the_strategy_needs_one():
    back = Candidate(pH=5.5, buffer="acetate", log_buffer=-1.0, titrant="EDTA", masking=(), indicator="xylenol_orange",
                     mode="back", back_metal="Zn")
    direct = Candidate(pH=10.0, buffer="ammonia", log_buffer=-1.0, titrant="EDTA", masking=(("TEA", 0.01),),
                       indicator="EBT", mode="direct", back_metal="Zn")
    assert method_text(back) == "EDTA, pH 5.50 (acetate), xylenol_orange, back-titration with Zn"
    assert method_text(direct) == "EDTA, pH 10.00 (ammonia), EBT, masking TEA"
