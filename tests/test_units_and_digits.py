"""Units and significant digits in the comparison and calibration parts of a page.

Units come from the sidecar's ``units`` table: the differences, bias and limits of agreement carry the
response's unit (the reference's when the response has none), read-back and inverse predictions the nominal
value's, and each coefficient its own (the intercept in y units, the slope in y per x). Every measured figure
in the comparison's conclusion follows the page's one digit rule (4 significant digits, trailing zeros kept;
percentages 3; levels the user declared as written), checked here by counting digits in the text itself.
"""

from __future__ import annotations

import re

from conftest import Built, dataset_page, fit_json


def _significant(text: str) -> int:
    digits = text.replace("−", "").replace(",", "").replace(".", "").lstrip("0")
    return len(digits)


def test_comparison_conclusion_has_units_and_the_page_digit_rule(example_build: Built) -> None:
    fit = fit_json(example_build.site, "field-ammonium-analyser-vs-lab")
    text = fit["comparison_text"]
    agreement = fit["agreement"]
    # the mean difference and its interval carry the unit (sidecar: units = { analyser = "mg/L N", ... })
    assert re.search(r"reads 0\.04824 mg/L N \(95% interval 0\.02600 to 0\.07047 mg/L N\)", text), text
    assert f"{agreement['mean_difference']:.4g}" == "0.04824"
    assert "At 0.2 mg/L N the bias is" in text
    assert "At 0.5 mg/L N the bias is" in text
    # every measured figure has 4 significant digits (0.02600: trailing zeros kept); percentages and the
    # declared levels are left out here
    figures = re.findall(r"(?<![\w.+−])(−?\d[\d,]*\.\d+)(?! %)", text)
    measured = [f for f in figures if f not in {"0.2", "0.5"}]
    assert len(measured) >= 11  # slope, mean difference and interval, limits, two biases with intervals
    assert all(_significant(f) == 4 for f in measured), measured
    # percentages: 3 significant digits with their sign
    for share in re.findall(r"\(([+−][\d.]+) %\)", text):
        assert _significant(share.lstrip("+")) == 3, share


def test_comparison_and_calibration_tables_name_their_units(example_build: Built) -> None:
    compared = dataset_page(example_build.site, "field-ammonium-analyser-vs-lab")
    bias = compared.split('id="h-bias"')[1].split("</thead>")[0]
    assert "Level (mg/L N)" in bias
    assert "Bias (mg/L N)" in bias
    assert "95% interval (mg/L N)" in bias
    agreement = compared.split('id="h-agreement"')[1].split("</thead>")[0]
    assert "Estimate (mg/L N)" in agreement
    calibrated = dataset_page(example_build.site, "calibration-nitrate-uv")
    readback = calibrated.split('id="h-readback"')[1].split("</thead>")[0]
    assert "Nominal (mg/L N)" in readback
    assert "Mean read back (mg/L N)" in readback
    assert "Deviation (mg/L N)" in readback
    inverse = calibrated.split('id="h-cal"')[1].split("</section>")[0]
    assert "Response (AU)" in inverse
    assert "Estimate (mg/L N)" in inverse
    assert "95% interval (mg/L N)" in inverse
    assert re.search(r"Detection limit [\d.]+ mg/L N and quantitation limit [\d.]+ mg/L N", inverse)
    estimates = calibrated.split('id="h-est"')[1].split("</table>")[0]
    rows = re.findall(r"<code>([^<]+)</code></th><td class=\"text\">([^<]+)</td>", estimates)
    assert rows == [("Intercept", "AU"), ("nitrate", "AU per mg/L N")]
    # the deviation of a read-back standard follows the 4-digit rule like the value read back
    fit = fit_json(example_build.site, "calibration-nitrate-uv")
    devs = re.findall(r"<td>(−?[\d.]+)</td><td>(?:−?[\d.]+ %|—)</td>", calibrated.split('id="h-readback"')[1])
    assert len(devs) == len(fit["back_calculated"])
    assert all(_significant(d) == 4 for d in devs), devs


def test_quadratic_coefficients_get_their_units(example_build: Built) -> None:
    page = dataset_page(example_build.site, "calibration-phosphate-molybdenum-blue")
    estimates = page.split('id="h-est"')[1].split("</table>")[0]
    rows = re.findall(r"<code>([^<]+)</code></th><td class=\"text\">([^<]+)</td>", estimates)
    assert rows == [
        ("Intercept", "AU"),
        ("phosphate", "AU per mg/L P"),
        ("I(phosphate ** 2)", "AU per (mg/L P)²"),
    ]
