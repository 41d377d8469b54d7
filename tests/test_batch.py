"""Batch helpers: report names by the one naming rule, the one-line method of the index and the summary."""
from pathlib import Path

from conftest import TINY_SCENARIO

from optimiser.batch import BatchRow, _unique_bases, index_html, method_text, summary_csv
from optimiser.method import Method


def test_report_names_follow_the_scenario_name_and_are_unique_within_a_batch(tmp_path):
    """The rule of ``run``: the scenario's name; repeats get -2, -3 in input order; an unreadable file its file name."""
    for folder in "abc":
        (tmp_path / folder).mkdir()
        (tmp_path / folder / "water.yaml").write_text(TINY_SCENARIO)
    (tmp_path / "other.yaml").write_text(TINY_SCENARIO.replace("name: tiny-calcium", "name: bath 1"))
    paths = [tmp_path / "a/water.yaml", tmp_path / "b/water.yaml", tmp_path / "c/water.yaml", tmp_path / "other.yaml",
             Path("d/missing file.yaml")]
    assert _unique_bases(paths) == ["tiny-calcium", "tiny-calcium-2", "tiny-calcium-3", "bath_1", "missing_file"]


def test_method_line_uses_display_names_and_doses_and_names_the_standard_only_where_needed():
    back = Method(pH=5.5, buffer="acetate", titrant="EDTA", titrant_conc_M=0.02, indicator="xylenol_orange",
                  buffer_total_M=0.1, mode="back", back_metal="Zn")
    direct = Method(pH=10.0, buffer="ammonia", titrant="EDTA", titrant_conc_M=0.01, indicator="EBT", buffer_total_M=0.3,
                    masking=(("TEA", 0.01),))
    no_ligand = Method(pH=2.0, buffer="nitric_acid", titrant="EDTA", titrant_conc_M=0.01, indicator="xylenol_orange",
                       buffer_total_M=0.0)
    assert method_text(back) == ("EDTA 0.02 mol/L, pH 5.50 (acetic acid / sodium acetate 0.1 mol/L), Xylenol orange, "
                                 "back-titration with Zn")
    assert method_text(direct) == ("EDTA 0.01 mol/L, pH 10.00 (ammonia / ammonium chloride 0.3 mol/L), "
                                   "Eriochrome Black T, masking triethanolamine 10 mmol/L")
    assert method_text(no_ligand) == "EDTA 0.01 mol/L, pH 2.00 (nitric acid), Xylenol orange"
    for text in (method_text(back), method_text(direct), method_text(no_ligand)):
        assert "_" not in text  # no internal id (xylenol_orange, nitric_acid)


def test_index_and_summary_say_no_method_and_hold_no_timing():
    rows = [BatchRow("a.yaml", "a", True, "a.html", "a.json", method="closest compromise, not to follow: X",
                     error_percent=1.5, message="no method meets the criteria", seconds=12.3, strategy="masking",
                     analyte="Ni", largest_part="Zn co-titrated +1.500 %"),
            BatchRow("b.yaml", "b", True, "b.html", "b.json", method="Y", error_percent=-0.0001, seconds=4.5,
                     meets_criteria=True, strategy="pH control", analyte="Zn")]
    page, table = index_html(rows), summary_csv(rows)
    assert ">no method<" in page and ">ok<" in page and ">masking<" in page and "Zn co-titrated +1.500 %" in page
    assert "12.3" not in page + table and "4.5" not in page + table
    assert table.splitlines()[1].split(",")[3] == "no method"
    assert ">0.000<" in page and "-0.000" not in page
