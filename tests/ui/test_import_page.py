"""The analyst's import page under AppTest: every problem of a refused file listed under the
name it was uploaded with, the option names of the page in messages, and a plot of what was
imported.

The uploaded files are written by the tests; the numbers plotted are compared with the
file's own header (the wavenumber axis) and rows (the absorbances).
"""

from __future__ import annotations

import csv
import io

import numpy as np

from seed_demo.synthetic import generate_population
from tests.factories import write_population_csv
from tests.ui.helpers import array, frame, open_page, plotly_specs, signed_in


def population_csv(tmp_path, n: int, prefix: str, seed: int) -> bytes:
    path = tmp_path / f"{prefix}.csv"
    write_population_csv(path, generate_population(n, family="gasoline", seed=seed), prefix, "PREM95")
    return path.read_bytes()


def upload_spectra(at, name: str, data: bytes, *, duplicates: str | None = None):
    at.file_uploader(key="imp_spectra_files").upload(name, data, "text/csv")
    if duplicates:
        at.radio(key="imp_spectra_duplicate").set_value(duplicates)
    return at.form_submit_button(key="FormSubmitter:import_spectra-Import spectra").click().run()


def with_bad_cells(data: bytes, rows: dict[int, str]) -> bytes:
    """The CSV with the first absorbance of the given data rows (1 = first) replaced."""
    table = list(csv.reader(io.StringIO(data.decode())))
    first_number = next(i for i, h in enumerate(table[0]) if h.replace(".", "").isdigit())
    for row, text in rows.items():
        table[row][first_number] = text
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows(table)
    return out.getvalue().encode()


def test_every_bad_row_of_a_spectrum_file_is_listed_under_its_uploaded_name(ui_reg, tmp_path):
    data = with_bad_cells(population_csv(tmp_path, 6, "BAD", 41), {2: "abc", 4: "", 5: "1,5"})
    at = upload_spectra(open_page(signed_in("analyst"), "imports"), "plant-b week 7.csv", data)
    assert not at.exception
    assert len(at.error) == 1 and "nothing of this import was stored" in at.error[0].value
    listed = frame(at, "problem")
    # data row k is file line k + 1 (the header is line 1)
    assert listed["line"].tolist() == ["3", "5", "6"]
    assert set(listed["file"]) == {"plant-b week 7.csv"}
    assert listed["problem"].tolist()[0] == "value 'abc' is not a number"
    shown = " ".join([e.value for e in at.error] + [str(v) for v in listed.to_numpy().ravel()])
    assert "specledger-upload" not in shown and "/tmp" not in shown
    assert "field --" not in shown and "None" not in shown


def test_a_duplicate_is_refused_in_the_pages_words_and_skipped_when_chosen(ui_reg, tmp_path):
    data = population_csv(tmp_path, 3, "DUP", 42)
    at = upload_spectra(open_page(signed_in("analyst"), "imports"), "dup.csv", data)
    assert any(s.value.startswith("3 spectra imported") for s in at.success)
    at = upload_spectra(open_page(signed_in("analyst"), "imports"), "dup.csv", data)
    message = at.error[0].value
    assert "choose to skip spectra already stored" in message and "--" not in message
    assert "skip them" in at.radio(key="imp_spectra_duplicate").options
    at = upload_spectra(open_page(signed_in("analyst"), "imports"), "dup.csv", data,
                        duplicates="skip them")
    assert not at.error
    assert any(s.value.startswith("0 spectra imported, 3 skipped") for s in at.success)


def test_the_imported_spectra_are_plotted_as_the_file_gives_them(ui_reg, tmp_path):
    data = population_csv(tmp_path, 4, "PLOT", 43)
    at = upload_spectra(open_page(signed_in("analyst"), "imports"), "plot.csv", data)
    assert not at.error, [e.value for e in at.error]
    (spec,) = plotly_specs(at)
    table = list(csv.reader(io.StringIO(data.decode())))
    axis_cols = [i for i, h in enumerate(table[0]) if h.replace(".", "").isdigit()]
    axis = np.array([float(table[0][i]) for i in axis_cols])
    assert [t["name"] for t in spec["data"]] == [row[0] for row in table[1:]]
    for trace, row in zip(spec["data"], table[1:]):
        x, y = array(trace["x"]), array(trace["y"])
        order = np.argsort(axis)
        np.testing.assert_allclose(x, axis[order])
        # stored as float32 (DEVELOPERS.md), so compared at float32 precision
        expected = np.array([float(row[i]) for i in axis_cols], dtype=np.float32)[order]
        np.testing.assert_allclose(y, expected, rtol=1e-6)
    assert spec["layout"]["xaxis"]["autorange"] == "reversed"  # wavenumber falls left to right
