"""Import: spectrum files (JCAMP-DX, CSV) and reference-result CSV files, all or nothing."""

from __future__ import annotations

import tempfile
from pathlib import Path

import plotly.graph_objects as go
import streamlit as st

from registry.lifecycle.permissions import Action
from registry.services import intake, references, views
from ui.common import FAILED, PLOT_TEMPLATE, call, may, require_actor

require_actor()
st.title("Import")
st.write("Every file is checked before anything is stored: one bad line refuses the whole import, "
         "and every problem found is listed.")


def safe_name(name: str) -> str:
    """The file's own name without folders (an upload name is not trusted as a path)."""
    return Path(name).name or "upload"


#: Blues and greys in turn (the app's neutral palette), so no line reads as a warning.
SPECTRUM_LINES = ("#2f5d8a", "#8a8a8a", "#5b7fa6", "#3a3a3a", "#86a8c8", "#5b5b5b")


def spectra_figure(preview: dict) -> go.Figure:
    """The imported spectra as lines, wavenumber falling left to right (the infrared habit)."""
    fig = go.Figure()
    for k, sp in enumerate(preview["spectra"]):
        fig.add_trace(go.Scatter(x=sp["x"], y=sp["y"], mode="lines", name=sp["sample"],
                                 line={"width": 1, "color": SPECTRUM_LINES[k % len(SPECTRUM_LINES)]},
                                 hovertemplate="%{x:.1f} cm⁻¹: %{y:.4g}"))
    shown = len(preview["spectra"])
    title = (f"Imported spectra ({shown} of {preview['total']} shown)" if shown < preview["total"]
             else f"Imported spectra ({shown})")
    fig.update_layout(template=PLOT_TEMPLATE, height=380, title=title,
                      xaxis={"title": "wavenumber (cm⁻¹)", "autorange": "reversed"},
                      yaxis_title="absorbance", showlegend=shown <= 12)
    return fig


#: What the page calls the service's rule for a spectrum whose content is already stored.
DUPLICATE_CHOICES = {"refuse the whole import": "error", "skip them": "skip"}

st.subheader("Spectra")
if not may(Action.IMPORT_SPECTRA):
    st.info("Importing spectra is an analyst's task; your roles do not include it.")
else:
    cat = call(views.catalog)
    serials = [i["serial"] for i in cat["instruments"] if i["active"]] if cat is not FAILED else []
    with st.form("import_spectra"):
        files = st.file_uploader("Spectrum files", type=["jdx", "dx", "jcamp", "jcm", "csv", "tsv", "txt"],
                                 accept_multiple_files=True, key="imp_spectra_files")
        instrument = st.selectbox("Instrument", serials, key="imp_spectra_instrument",
                                  help="A CSV instrument column overrides it row by row.")
        duplicate = st.radio("Spectra already stored", list(DUPLICATE_CHOICES), horizontal=True,
                             key="imp_spectra_duplicate",
                             help="A spectrum whose content is already in the registry.")
        go_spectra = st.form_submit_button("Import spectra")
    if go_spectra:
        if not files:
            st.error("Choose at least one file.")
        else:
            with tempfile.TemporaryDirectory(prefix="specledger-upload-") as tmp:
                paths, names = [], {}
                for k, f in enumerate(files):
                    folder = Path(tmp) / str(k)  # two uploads may share a name
                    folder.mkdir()
                    path = folder / safe_name(f.name)
                    path.write_bytes(f.getvalue())
                    paths.append(path)
                    names[str(path)] = safe_name(f.name)
                summary = call(intake.import_spectra, paths, instrument=instrument,
                               on_duplicate=DUPLICATE_CHOICES[duplicate], names=names)
            if summary is not FAILED:
                st.success(f"{summary.imported} spectra imported, {summary.skipped} skipped as already "
                           f"stored, {summary.samples_created} new samples, from {summary.files} file(s).")
                st.dataframe([{"file": names.get(p, Path(p).name), **v}
                              for p, v in summary.per_file.items()],
                             hide_index=True, key="imp_spectra_summary")
                if summary.spectrum_ids:
                    preview = call(views.spectra_preview, summary.spectrum_ids)
                    if preview is not FAILED:
                        st.plotly_chart(spectra_figure(preview), key="imp_spectra_plot")

st.subheader("Reference results")
if not may(Action.IMPORT_REFERENCES):
    st.info("Importing reference results is an analyst's task; your roles do not include it.")
else:
    st.caption("CSV columns: " + ", ".join(references.REQUIRED_COLUMNS)
               + " (optional: " + ", ".join(references.OPTIONAL_COLUMNS) + ")")
    with st.form("import_references"):
        ref_file = st.file_uploader("Reference CSV", type=["csv", "txt"], key="imp_ref_file")
        go_ref = st.form_submit_button("Import reference results")
    if go_ref:
        if ref_file is None:
            st.error("Choose a file.")
        else:
            try:
                text = ref_file.getvalue().decode("utf-8-sig")
            except UnicodeDecodeError as exc:
                st.error(f"{safe_name(ref_file.name)}: not UTF-8 text ({exc.reason} at byte {exc.start})")
                text = None
            if text is not None:
                summary = call(references.import_references, safe_name(ref_file.name), text=text)
                if summary is not FAILED:
                    st.success(f"{summary.imported} results imported; {summary.suspect} marked suspect "
                               f"(range of repeats beyond the ISO 5725-6 critical range for their number); "
                               f"{summary.linked_to_selection} answer a selection run.")

st.subheader("Suspect reference results")
suspect = call(references.list_references, status="suspect")
if suspect is FAILED:
    st.stop()
if not suspect:
    st.write("No suspect results: no repeats disagree by more than the method's repeatability.")
else:
    st.caption("Repeats that differ by more than the method's repeatability r hold their sample "
               "out of calibration until a reviewer keeps or rejects each result (common practice).")
    st.dataframe(suspect, hide_index=True, key="suspect_table",
                 column_order=["id", "sample", "property", "method", "value", "lab", "tested_at",
                               "reason"])
    if may(Action.RESOLVE_SUSPECT_REFERENCE):
        with st.form("resolve_suspect"):
            rid = st.selectbox("Result", [r["id"] for r in suspect], key="res_id",
                               format_func=lambda i: next(f"#{r['id']} {r['sample']} {r['property']} "
                                                          f"= {r['value']:g} ({r['lab']})"
                                                          for r in suspect if r["id"] == i))
            decision = st.radio("Decision", ["accept", "reject"], horizontal=True, key="res_decision")
            reason = st.text_input("Reason (what was found)", key="res_reason")
            if st.form_submit_button("Record the decision"):
                done = call(references.resolve_suspect, int(rid), decision, reason)
                if done is not FAILED:
                    st.success(f"Result #{done.id} is now {done.status}.")
    else:
        st.info("Resolving suspect results is a reviewer's task.")
