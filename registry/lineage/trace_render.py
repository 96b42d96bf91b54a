"""Render a trace document as a terminal tree or as one self-contained HTML page.

The HTML page has inline CSS only: no scripts, fonts, images or links to
anything outside the file, so an auditor can archive it and open it offline.
Every value from the registry is escaped.
"""

from __future__ import annotations

import json
from html import escape
from typing import Any, Iterable

from ..chemometrics.diagnostics import describe_q_limit

Node = tuple[str, list]  # (label, children)


def _short(h: str | None, n: int = 12) -> str:
    return (h[:n] + "…") if h else "-"


def _when(t: str | None) -> str:
    # "2027-01-01T08:00:00.123456Z" -> "2027-01-01 08:00:00 UTC"
    if not t:
        return "-"
    return t.replace("T", " ").split(".")[0].rstrip("Z") + " UTC"


def _num(v: Any, digits: int = 4) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.{digits}g}"
    return str(v)


def _ok(flag: bool | None) -> str:
    return {True: "hash ok", False: "ALTERED", None: "not checked"}[flag]


def _recipe(steps: list[dict]) -> str:
    parts = []
    for st in steps or []:
        args = ", ".join(f"{k}={json.dumps(v)}" for k, v in st.items() if k != "step")
        parts.append(f"{st.get('step', '?')}({args})")
    return " → ".join(parts) or "(none)"


def _signature_text(sig: dict | None) -> str:
    if not sig:
        return ""
    match = {True: "signed content unchanged", False: "SIGNED CONTENT CHANGED",
             None: "signed parts not comparable"}[sig.get("parts_match_current")]
    return (f"signed by {sig['signer']} at {_when(sig['signed_at'])}: {sig['meaning']}"
            + (f" ({sig['reason']})" if sig.get("reason") else "") + f"; {match}")


def _result_text(r: dict) -> str:
    bits = [f"result #{r['id']} {r['method']} = {_num(r['value'], 6)} {r.get('unit') or ''}".rstrip(),
            f"lab {r['lab'] or '-'}", f"tested {_when(r['tested_at'])}",
            f"operator {r['operator'] or '-'}", f"r {_num(r['r'], 3)}", f"R {_num(r['R'], 3)}",
            r["status"]]
    if r.get("supersedes"):
        bits.append(f"corrects #{r['supersedes']}")
    if r.get("superseded_by"):
        bits.append(f"superseded by #{r['superseded_by']}")
    if r.get("used"):
        bits.append("USED")
    if not r.get("hash_ok", True):
        bits.append("ALTERED")
    return ", ".join(bits)


def _spectrum_text(sp: dict) -> str:
    used = ", USED" if sp.get("used") else ""
    return (f"spectrum #{sp['id']} {_short(sp['sha256'])} on {sp['instrument']}, acquired "
            f"{_when(sp['acquired_at'])}, operator {sp['operator'] or '-'}{used}")


# --------------------------------------------------------------------------- tree
def _version(m: dict) -> str:
    """A version named with its family: a look-up is not called a model."""
    return f"{m.get('family') or 'model'} version {m['label']}"


def _input_text(i: dict) -> str:
    return (f"input {i['property']} = {_num(i['value'], 6)}: prediction {i['prediction_id']} by "
            f"{i.get('family') or 'model'} version {i['model']}")


def _models_text(models: list[dict]) -> str:
    return ", ".join(f"{m['label']} ({m.get('family') or 'model'}, {m['state']})"
                     for m in models) or "none"


def _model_node(m: dict) -> Node:
    kids: list[Node] = [
        (f"recipe: {_recipe(m['recipe'])}", []),
        (f"{m['family']}: {m.get('description') or ''}", []),
        (f"{m['n_components']} components; RMSECV {_num(m['cv'].get('rmsecv_at_selected'))} "
         f"({m['cv'].get('method')}, {m['cv'].get('n_folds')} folds, {m['cv'].get('selection_rule')})"
         if m["cv"].get("method") != "none" else
         f"{m['n_components']} fitted parameters; no cross-validation curve", []),
        (f"artifact {m['artifact_sha256']} [{_ok(m['artifact_hash_ok'])}]", []),
        (f"Q-residual limit: {describe_q_limit(m.get('q_limit'))}", []),
        ("state history", [(f"{_when(h['at'])} {h['from']} → {h['to']} by {h['by']}"
                            + (f": {h['reason']}" if h['reason'] else "")
                            + (f" [{_signature_text(h['signature'])}]" if h["signature"] else ""), [])
                           for h in m["state_history"]]),
        ("validations", [(f"#{v['id']} {v['kind']} on {v['calibration_set']}: "
                          f"{'PASS' if v['passed'] else 'FAIL'} n={v['n']} SEP={_num(v['sep'])} "
                          f"RMSEP={_num(v['rmsep'])} bias={_num(v['bias'])} (p={_num(v['bias_p'], 3)}) "
                          f"SEP/σ_R={_num(v['sep_over_sigma_r'], 3)} 1.96·SEP={_num(v['sep_95'])} "
                          f"vs R={_num(v['reproducibility'])} R²={_num(v['r2'])} "
                          f"by {v['by']} at {_when(v['at'])}"
                          + (f"; {'; '.join(v['reasons'])}" if v["reasons"] else ""),
                          [(f"rule: {v['rule']}", [])])
                         for v in m["validations"]]),
        ("deployments", [(f"{d['instrument']} {d['state']} since {_when(d['deployed_at'])} by {d['by']}"
                          + (f" until {_when(d['ended_at'])}" if d["ended_at"] else "")
                          + (f" [{_signature_text(d['signature'])}]" if d["signature"] else ""), [])
                         for d in m["deployments"]]),
    ]
    other_sigs = [s for s in m["signatures"]
                  if all((h["signature"] or {}).get("id") != s["id"] for h in m["state_history"])
                  and all((d["signature"] or {}).get("id") != s["id"] for d in m["deployments"])]
    if other_sigs:
        kids.append(("other signatures", [(_signature_text(s), []) for s in other_sigs]))
    qc = m.get("qc_at_prediction")
    if qc is not None:
        kids.append((f"QC at prediction time ({_when(qc['at'])}): "
                     f"{'QC SIGNAL OPEN' if qc['signal_open'] else 'no open QC signal'}",
                     [(f"{r['material']} on {r['instrument']} {_when(r['measured_at'])}: "
                       f"{_num(r['measured_value'], 6)} (known {_num(r['known_value'], 6)})"
                       + (f" signals: {', '.join(map(str, r['signals']))}" if r["signals"] else ""), [])
                      for r in qc["recent_results"]]
                     + [(f"open trigger {t['kind']} raised {_when(t['raised_at'])}", [])
                        for t in qc["open_triggers"]]))
    due = m["due"]
    if due["applies"]:
        left = "OVERDUE" if due["overdue"] else f"{due['days_left']} days left"
        kids.append((f"revalidation: due {_when(due['due_at'])} ({left})",
                     [(r, []) for r in due["reasons"]]))
    else:
        kids.append((f"revalidation: not applicable in state {m['state']}", []))
    return (f"{_version(m)} ({m['property']}, {m['state']}), author {m['author']}, "
            f"created {_when(m['created_at'])}", kids)


def _member_node(mem: dict) -> Node:
    s = mem["sample"]
    kids = [(_spectrum_text(sp), []) for sp in mem["spectra"]]
    kids += [(_result_text(r), []) for r in mem["reference_results"]]
    sel = mem.get("selection")
    if sel:
        kids.append((f"chosen by selection run {sel['run_id']} ({sel['method']}) rank {sel['rank']}"
                     f" on {_when(sel['selected_at'])} by {sel['by']}"
                     + (f": {sel['reason']}" if sel["reason"] else ""), []))
    return (f"sample {s.get('external_id', s['id'])} ({mem['role']}), reference value "
            f"{_num(mem['reference_value'], 6)}", kids)


def _calset_node(cs: dict) -> Node:
    return (f"calibration set {cs['name']} ({cs['property']}, {cs['n_cal']} cal / {cs['n_val']} val, "
            f"rule {cs['validation_rule']}) sha256 {cs['sha256']} [{_ok(cs['hash_ok'])}], "
            f"frozen by {cs['created_by']} at {_when(cs['created_at'])}",
            [_member_node(m) for m in cs["members"]])


def _sample_record_node(rec: dict) -> Node:
    kids = [(_spectrum_text(sp), []) for sp in rec["spectra"]]
    kids += [(_result_text(r), []) for r in rec["reference_results"]]
    kids += [(f"member of calibration set {c['name']} ({c['role']}, reference value "
              f"{_num(c['reference_value'], 6)}); versions: {_models_text(c['models'])}", [])
             for c in rec["calibration_sets"]]
    return (f"sample {rec['sample']['external_id']}: record for {rec['property']}", kids)


def _title(doc: dict) -> str:
    root = doc["root"]
    p = doc.get("prediction")
    if p:
        m = doc.get("model") or {"label": p["model"]}
        return (f"Trace of prediction {p['id']}: {p['property']} = {_num(p['value'], 6)} "
                f"by {_version(m)}")
    if root["kind"] == "sample":
        return f"Trace of sample {root['sample']} for {root['property']} (no prediction)"
    return f"Trace of model version {root.get('model')}"


def _integrity_lines(doc: dict) -> list[str]:
    integ = doc["integrity"]
    names = [("spectrum_hash_ok", "predicted spectrum"), ("artifact_hash_ok", "model artifact"),
             ("calibration_set_hash_ok", "calibration set"),
             ("reference_results_hash_ok", "reference results"),
             ("validation_records_hash_ok", "validation records"),
             ("signatures_match_content", "signed content")]
    signed = {True: "matches", False: "CHANGED", None: "not checked"}
    lines = [f"{label}: {signed[integ[key]] if key == 'signatures_match_content' else _ok(integ[key])}"
             for key, label in names]
    if integ["altered"]:
        lines.append("ALTERED: " + ", ".join(integ["altered"]))
    lines.append(f"audit trail: {doc['audit']['events']} events, head {doc['audit']['head'] or '-'}")
    lines.append(integ["note"])
    return lines


def tree(doc: dict) -> Node:
    """The trace as (label, children) nodes, root first."""
    kids: list[Node] = []
    p = doc.get("prediction")
    if p:
        value = f"{_num(p['value'], 6)} {p['unit'] or ''}".strip()
        kids.append((f"prediction {p['id']}: {p['property']} = {value}"
                     f" on {p['instrument']} at {_when(p['predicted_at'])} by {p['by']}; flags: "
                     f"{', '.join(p['flags']) or 'none'}",
                     [(_input_text(i), []) for i in p.get("inputs") or []]))
    sp = doc.get("spectrum")
    if sp:
        kids.append((f"spectrum #{sp['id']} of sample {sp['sample_id']} sha256 {sp['sha256']} "
                     f"[{_ok(sp['hash_ok'])}]; {sp['instrument']}, acquired {_when(sp['acquired_at'])}, "
                     f"operator {sp['operator'] or '-'}", []))
    if doc.get("sample_record"):
        kids.append(_sample_record_node(doc["sample_record"]))
    if doc.get("model"):
        kids.append(_model_node(doc["model"]))
    if doc.get("calibration_set"):
        kids.append(_calset_node(doc["calibration_set"]))
    kids.append(("integrity", [(line, []) for line in _integrity_lines(doc)]))
    return (_title(doc), kids)


def render_text(doc: dict) -> str:
    """A readable tree for the terminal."""
    label, kids = tree(doc)
    out = [label, doc["caution"]]

    def walk(nodes: list[Node], prefix: str) -> None:
        for i, (text, children) in enumerate(nodes):
            last = i == len(nodes) - 1
            out.append(f"{prefix}{'└─ ' if last else '├─ '}{text}")
            walk(children, prefix + ("   " if last else "│  "))
    walk(kids, "")
    return "\n".join(out)


# --------------------------------------------------------------------------- HTML
_CSS = """
body{font:14px/1.45 system-ui,sans-serif;margin:2rem auto;max-width:72rem;padding:0 1rem;color:#1b1b1b}
h1{font-size:1.4rem;margin:0 0 .3rem} h2{font-size:1.1rem;margin:1.4rem 0 .4rem}
.caution{border-left:4px solid #b35900;background:#fff4e5;padding:.5rem .8rem;margin:.6rem 0}
.meta{color:#555;font-size:.85rem}
table{border-collapse:collapse;width:100%;margin:.3rem 0 .8rem;font-size:.9rem}
th,td{border:1px solid #ccc;padding:.25rem .45rem;text-align:left;vertical-align:top}
th{background:#f0f0f0} code{font:12px ui-monospace,monospace;word-break:break-all}
details{margin:.3rem 0 .3rem .6rem} summary{cursor:pointer;font-weight:600}
.bad{color:#a00000;font-weight:700} .ok{color:#1d6b2a} .muted{color:#777}
dl{display:grid;grid-template-columns:max-content 1fr;gap:.15rem .8rem;margin:.3rem 0}
dt{font-weight:600} dd{margin:0}
@media print{details{display:block} summary{display:none}}
"""


def _e(v: Any) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return escape(_num(v, 6))
    if isinstance(v, bool):
        return "yes" if v else "no"
    return escape(str(v))


def _flag(ok: bool | None) -> str:
    if ok is None:
        return '<span class="muted">not checked</span>'
    return '<span class="ok">hash ok</span>' if ok else '<span class="bad">ALTERED</span>'


def _dl(pairs: Iterable[tuple[str, str]]) -> str:
    return "<dl>" + "".join(f"<dt>{escape(k)}</dt><dd>{v}</dd>" for k, v in pairs) + "</dl>"


def _table(headers: list[str], rows: list[list[str]]) -> str:
    if not rows:
        return '<p class="muted">none</p>'
    head = "".join(f"<th>{escape(h)}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _sample_dl(s: dict) -> str:
    return _dl([("site", _e(s.get("site"))), ("grade", _e(s.get("grade"))),
                ("taken at", _e(_when(s.get("taken_at")))), ("batch", _e(s.get("batch") or None))])


def _sig_html(sig: dict | None) -> str:
    return _e(_signature_text(sig)) if sig else '<span class="muted">unsigned</span>'


def _results_table(results: list[dict]) -> str:
    return _table(["#", "method", "value", "lab", "tested at", "operator", "r", "R", "status",
                   "correction", "used", "hash"],
                  [[_e(r["id"]), _e(r["method"]), _e(r["value"]), _e(r["lab"]),
                    _e(_when(r["tested_at"])), _e(r["operator"]), _e(r["r"]), _e(r["R"]),
                    _e(r["status"]) + (f"<br><span class='muted'>{_e(r['status_reason'])}</span>"
                                       if r.get("status_reason") else ""),
                    (f"corrects #{_e(r['supersedes'])} " if r.get("supersedes") else "")
                    + (f"superseded by #{_e(r['superseded_by'])}" if r.get("superseded_by") else ""),
                    "yes" if r.get("used") else "", _flag(r.get("hash_ok"))] for r in results])


def _spectra_table(spectra: list[dict]) -> str:
    return _table(["#", "sha256", "instrument", "acquired at", "operator", "file", "used"],
                  [[_e(s["id"]), f"<code>{_e(s['sha256'])}</code>", _e(s["instrument"]),
                    _e(_when(s["acquired_at"])), _e(s["operator"]), _e(s.get("source_file")),
                    "yes" if s.get("used") else ""] for s in spectra])


def _model_html(m: dict) -> str:
    cv = m["cv"]
    fit = ([("components", _e(m["n_components"])),
            ("RMSECV at chosen size", _e(cv.get("rmsecv_at_selected"))),
            ("cross-validation", _e(f"{cv.get('method')}, {cv.get('n_folds')} folds, "
                                    f"{cv.get('selection_rule')}"))]
           if cv.get("method") != "none" else
           [("fitted parameters", _e(m["n_components"])),
            ("cross-validation", "none (this family stores no cross-validation curve)")])
    parts = [f"<h2>Version {_e(m['label'])} ({_e(m.get('family') or 'model')})</h2>", _dl([
        ("family", _e(f"{m.get('family')}: {m.get('description') or ''}")),
        ("property", _e(m["property"])), ("grade", _e(m["grade"])), ("state", _e(m["state"])),
        ("author", _e(m["author"])), ("created", _e(_when(m["created_at"]))),
        ("parent", _e(m["parent"])), ("recipe", _e(_recipe(m["recipe"]))), *fit,
        ("artifact sha256", f"<code>{_e(m['artifact_sha256'])}</code> {_flag(m['artifact_hash_ok'])}"),
        ("Q-residual limit", _e(describe_q_limit(m.get("q_limit")))),
        ("last validated", _e(_when(m["last_validated_at"])))])]
    parts.append("<details open><summary>State history and signatures</summary>" + _table(
        ["when", "from", "to", "by", "reason", "signature"],
        [[_e(_when(h["at"])), _e(h["from"]), _e(h["to"]), _e(h["by"]), _e(h["reason"]),
          _sig_html(h["signature"])] for h in m["state_history"]])
        + _table(["signature", "signer", "meaning", "signed at", "signed sha256", "content now"],
                 [[_e(s["id"]), _e(s["signer"]), _e(s["meaning"]), _e(_when(s["signed_at"])),
                   f"<code>{_e(s['signed_sha256'])}</code>",
                   {True: '<span class="ok">unchanged</span>',
                    False: '<span class="bad">CHANGED</span>',
                    None: '<span class="muted">not comparable</span>'}[s["parts_match_current"]]]
                  for s in m["signatures"]]) + "</details>")
    parts.append("<details open><summary>Validation records</summary>" + _table(
        ["#", "kind", "set", "verdict", "n", "SEP", "RMSEP", "bias", "bias p", "R²", "SEP/σ_R",
         "1.96·SEP", "R", "acceptance rule", "by", "when", "reasons", "hash"],
        [[_e(v["id"]), _e(v["kind"]), _e(v["calibration_set"]),
          '<span class="ok">pass</span>' if v["passed"] else '<span class="bad">fail</span>',
          _e(v["n"]), _e(v["sep"]), _e(v["rmsep"]), _e(v["bias"]), _e(v["bias_p"]), _e(v["r2"]),
          _e(v["sep_over_sigma_r"]), _e(v["sep_95"]), _e(v["reproducibility"]), _e(v["rule"]),
          _e(v["by"]), _e(_when(v["at"])), _e("; ".join(v["reasons"])),
          _flag(v["hash_ok"])] for v in m["validations"]]) + "</details>")
    parts.append("<details open><summary>Deployments</summary>" + _table(
        ["instrument", "state", "deployed", "ended", "by", "signature"],
        [[_e(d["instrument"]), _e(d["state"]), _e(_when(d["deployed_at"])),
          _e(_when(d["ended_at"]) if d["ended_at"] else None), _e(d["by"]),
          _sig_html(d["signature"])] for d in m["deployments"]]) + "</details>")
    qc = m.get("qc_at_prediction")
    if qc is not None:
        state = ('<span class="bad">QC signal open</span>' if qc["signal_open"]
                 else '<span class="ok">no open QC signal</span>')
        parts.append(f"<details open><summary>QC at prediction time ({_e(_when(qc['at']))})"
                     f"</summary><p>{state}</p>" + _table(
                         ["material", "instrument", "measured at", "measured", "known", "signals", "by"],
                         [[_e(r["material"]), _e(r["instrument"]), _e(_when(r["measured_at"])),
                           _e(r["measured_value"]), _e(r["known_value"]),
                           _e(", ".join(map(str, r["signals"]))), _e(r["by"])]
                          for r in qc["recent_results"]])
                     + _table(["open trigger", "raised", "detail"],
                              [[_e(t["kind"]), _e(_when(t["raised_at"])),
                                _e(json.dumps(t["detail"], ensure_ascii=False))]
                               for t in qc["open_triggers"]]) + "</details>")
    due = m["due"]
    due_text = (f"due {_when(due['due_at'])}, "
                + ("OVERDUE" if due["overdue"] else f"{due['days_left']} days left")
                if due["applies"] else f"not applicable in state {m['state']}")
    parts.append(_dl([("revalidation", _e(due_text)),
                      ("interval", _e(f"{due['interval_days']} days")),
                      ("reasons", _e("; ".join(due["reasons"]) or "-"))]))
    parts.append("<details><summary>Audit events of this model version</summary>" + _table(
        ["seq", "when", "user", "action", "hash"],
        [[_e(e["seq"]), _e(_when(e["at"])), _e(e["user"]), _e(e["action"]),
          f"<code>{_e(e['hash'])}</code>"] for e in m["audit_events"]]) + "</details>")
    return "\n".join(parts)


def _calset_html(cs: dict) -> str:
    rows = []
    for mem in cs["members"]:
        s = mem["sample"]
        sel = mem.get("selection")
        rows.append(
            f"<details><summary>{_e(s.get('external_id', s['id']))} — {_e(mem['role'])}, "
            f"reference value {_e(mem['reference_value'])}</summary>"
            + _sample_dl(s)
            + "<b>Spectra</b>" + _spectra_table(mem["spectra"])
            + "<b>Reference results</b>" + _results_table(mem["reference_results"])
            + "<b>Selection</b> " + (
                _e(f"run {sel['run_id']} ({sel['method']}), rank {sel['rank']}, "
                   f"{_when(sel['selected_at'])} by {sel['by']}: {sel['reason']}") if sel
                else '<span class="muted">not chosen by a selection run</span>')
            + "</details>")
    summary = _table(["sample", "role", "reference value", "results used", "spectra used",
                      "selection run"],
                     [[_e(m["sample"].get("external_id")), _e(m["role"]), _e(m["reference_value"]),
                       _e(", ".join(f"#{i}" for i in m["reference_result_ids"])),
                       _e(", ".join(f"#{i}" for i in m["spectrum_ids"])),
                       _e(m["selection"]["run_id"] if m.get("selection") else None)]
                      for m in cs["members"]])
    return (f"<h2>Calibration set {_e(cs['name'])}</h2>" + _dl([
        ("property", _e(cs["property"])), ("grade", _e(cs["grade"])),
        ("members", _e(f"{cs['n_cal']} calibration / {cs['n_val']} validation")),
        ("validation rule", _e(cs["validation_rule"])),
        ("frozen", _e(f"{_when(cs['created_at'])} by {cs['created_by']}")),
        ("sha256", f"<code>{_e(cs['sha256'])}</code> {_flag(cs['hash_ok'])}")])
        + "<details open><summary>Members</summary>" + summary + "</details>"
        + "<details><summary>Each member's spectra, reference results and selection</summary>"
        + "".join(rows) + "</details>")


def render_html(doc: dict) -> str:
    """One self-contained HTML page (inline CSS, no scripts, no external references)."""
    body = [f"<h1>{_e(_title(doc))}</h1>",
            f"<p class='meta'>Generated {_e(_when(doc['generated_at']))}; document "
            f"{_e(doc['schema'])} version {_e(doc['schema_version'])}</p>",
            f"<p class='caution'>{_e(doc['caution'])}</p>"]
    p = doc.get("prediction")
    if p:
        body.append("<h2>Prediction</h2>" + _dl([
            ("value", _e(f"{_num(p['value'], 6)} {p['unit'] or ''}".strip())),
            ("property", _e(p["property"])), ("model", _e(p["model"])),
            ("instrument", _e(p["instrument"])), ("predicted at", _e(_when(p["predicted_at"]))),
            ("by", _e(p["by"])),
            ("flags", _e(", ".join(p["flags"])) if p["flags"] else '<span class="ok">none</span>'),
            ("inputs", _e("; ".join(_input_text(i) for i in p.get("inputs") or []) or "none")),
            ("diagnostics", _e(", ".join(f"{k} {_num(v)}" for k, v in p["diagnostics"].items()
                                         if k != "inputs")))]))
    sp = doc.get("spectrum")
    if sp:
        body.append("<h2>Spectrum</h2>" + _dl([
            ("id", _e(sp["id"])), ("sample", _e(sp["sample_id"])),
            ("sha256", f"<code>{_e(sp['sha256'])}</code> {_flag(sp['hash_ok'])}"),
            ("instrument", _e(sp["instrument"])), ("acquired at", _e(_when(sp["acquired_at"]))),
            ("operator", _e(sp["operator"])), ("file", _e(sp.get("source_file"))),
            ("axis", _e(f"{sp['axis']['n_points']} points, {sp['axis']['first_x']}–"
                        f"{sp['axis']['last_x']} {sp['axis']['unit']}"))]))
    rec = doc.get("sample_record")
    if rec:
        body.append(f"<h2>Sample {_e(rec['sample']['external_id'])} ({_e(rec['property'])})</h2>"
                    + _sample_dl(rec["sample"]) + "<b>Spectra</b>" + _spectra_table(rec["spectra"])
                    + "<b>Reference results</b>" + _results_table(rec["reference_results"])
                    + "<b>Calibration sets and models</b>" + _table(
                        ["set", "role", "reference value", "sha256", "models"],
                        [[_e(c["name"]), _e(c["role"]), _e(c["reference_value"]),
                          f"<code>{_e(c['sha256'])}</code>",
                          _e(_models_text(c["models"]))]
                         for c in rec["calibration_sets"]]))
    if doc.get("model"):
        body.append(_model_html(doc["model"]))
    if doc.get("calibration_set"):
        body.append(_calset_html(doc["calibration_set"]))
    body.append("<h2>Integrity</h2><ul>" + "".join(
        f"<li>{_e(line)}</li>" for line in _integrity_lines(doc)) + "</ul>")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{_e(_title(doc))}</title><style>{_CSS}</style></head>"
            f"<body>{''.join(body)}</body></html>\n")


def render(doc: dict, fmt: str) -> str:
    """``text``, ``json`` or ``html``."""
    if fmt == "json":
        return json.dumps(doc, indent=2, ensure_ascii=False) + "\n"
    if fmt == "html":
        return render_html(doc)
    if fmt == "text":
        return render_text(doc) + "\n"
    from ..errors import InputError

    raise InputError(f"unknown trace format {fmt!r}; use text, json or html", field="--format")
