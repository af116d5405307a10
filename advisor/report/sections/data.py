"""Section 2, the data: parameter table, campaigns with failure shares, failed trials by
line, replicate noise beside each surrogate's fitted noise."""

from __future__ import annotations

from reportlab.lib.units import mm
from reportlab.platypus import Paragraph, Table

from ._base import (_S, _TEXT_W, _View, _cells, _e, _finite, _heading, _name, _num, _p,
                    _pct, _table)

#: lost is enough to ask whether the space reaches outside the process window).
HIGH_FAILURE_SHARE = 0.2
_MAX_FAILED_LISTED = 30


# ======================================================================================
# 2. data
# ======================================================================================
def story(v: _View) -> list:
    d = v.d
    story = _heading(1)
    story.append(Paragraph("Parameters", _S["h2"]))
    story.append(_parameter_table(d.get("space") or []))
    notes = d.get("notes") or []
    if notes:
        story.append(_p("Loader notes: " + _e("; ".join(notes[:12]))
                        + (f" (and {len(notes) - 12} more)" if len(notes) > 12 else ""),
                        "small"))
    story.append(Paragraph("Campaigns", _S["h2"]))
    story += _campaign_table(d.get("campaigns") or [])
    story.append(Paragraph("Failed trials", _S["h2"]))
    story.append(_failed_list(d.get("failed_trials") or []))
    story.append(Paragraph("Observation noise", _S["h2"]))
    story += _noise_block(v)
    return story


def _parameter_table(space) -> Table | Paragraph:
    if not space:
        return _p("No parameters recorded.")
    head = ["parameter", "type", "range or levels", "scale", "source", "note"]
    rows = [_cells(head, "cellhead")]
    for p in space:
        if "levels" in p:
            lv = [str(x) for x in p["levels"]]
            shown = ", ".join(lv[:12]) + (f", … ({len(lv)} levels)" if len(lv) > 12 else "")
        else:
            shown = f"{_num(p.get('low'), 4)} to {_num(p.get('high'), 4)}"
            if p.get("unit"):
                shown += f" {p['unit']}"
        rows.append(_cells([_e(p.get("name")), _e(p.get("kind")), _e(shown),
                            _e(p.get("scale", "")), _e(p.get("source", "")),
                            _e(p.get("note", ""))]))
    w = [46 * mm, 17 * mm, 34 * mm, 12 * mm, 15 * mm]
    return _table(rows, w + [_TEXT_W - sum(w)])


def _campaign_table(camps) -> list:
    if not camps:
        return [_p("No campaign information.")]
    rows = [_cells(["campaign", "trials", "failed", "failure share", "flag"], "cellhead")]
    flagged = []
    for c in camps:
        share = c.get("failure_share")
        high = _finite(share) and float(share) >= HIGH_FAILURE_SHARE
        if high:
            flagged.append(c.get("campaign"))
        rows.append(_cells([_e(c.get("campaign")), str(c.get("trials", "")),
                            str(c.get("failed", "")), _pct(share),
                            "<b>high failure share</b>" if high else ""]))
    out = [_table(rows, [45 * mm, 20 * mm, 20 * mm, 25 * mm, 40 * mm])]
    if flagged:
        out.append(_p(f"Campaigns with a failure share of {_pct(HIGH_FAILURE_SHARE)} or more: "
                      f"{_e(', '.join(map(str, flagged)))}. Check whether their settings "
                      "reached outside the working window before reusing that region.",
                      "small"))
    if len(camps) == 1:
        out.append(_p("One campaign only: campaign-to-campaign shifts cannot be checked.",
                      "small"))
    return out


def _failed_list(failed) -> Paragraph | Table:
    if not failed:
        return _p("No failed trials.")
    shown = failed[:_MAX_FAILED_LISTED]
    rows = [_cells(["line", "campaign", "reason"], "cellhead")]
    for f in shown:
        rows.append(_cells([str(f.get("line", "")), _e(f.get("campaign") or ""),
                            _e(f.get("reason", ""))]))
    if len(failed) > len(shown):
        rows.append(_cells(["", "", f"… and {len(failed) - len(shown)} more failed trials "
                                    "(all listed in the JSON output)"]))
    return _table(rows, [14 * mm, 30 * mm, _TEXT_W - 44 * mm])


def _noise_block(v: _View) -> list:
    noise = v.d.get("noise") or {}
    rep = noise.get("replicates")
    out = []
    if rep and _finite(rep.get("noise_std")):
        iv = rep.get("noise_std_interval") or [None, None]
        out.append(_p(f"Replicates: {rep.get('groups')} repeated settings ({rep.get('rows')} "
                      f"trials, {rep.get('dof')} degrees of freedom) give a pooled noise "
                      f"standard deviation of <b>{_num(rep['noise_std'])}</b> "
                      f"({_pct(rep.get('level', 0.95))} interval {_num(iv[0])} to "
                      f"{_num(iv[1])}, in {_e(v.objective_label)})."))
    else:
        out.append(_p("Replicates: no setting was repeated, so the log gives no direct "
                      "estimate of the observation noise."))
    fitted = noise.get("fitted") or {}
    rows = [_cells(["surrogate", "fitted noise std", "ratio to replicate estimate"],
                   "cellhead")]
    for n in v.names:
        f = fitted.get(n)
        ratio = (float(f) / float(rep["noise_std"]) if rep and _finite(f)
                 and _finite(rep.get("noise_std")) and float(rep["noise_std"]) > 0 else None)
        rows.append(_cells([_name(n), _num(f) if _finite(f) else "not reported by the model",
                            _num(ratio) if ratio is not None else "n/a"]))
    out.append(_table(rows, [60 * mm, 45 * mm, 45 * mm]))
    between = (v.d.get("input") or {}).get("between_campaign_sd")
    if _finite(between):
        out.append(_p(f"Campaign-to-campaign shift: the campaign GP's fitted between-campaign "
                      f"standard deviation is <b>{_num(between)}</b> {_e(v.objective_label)} "
                      "(a random offset per campaign; a new campaign's offset is unknown and "
                      "this spread enters its predictions)."))
    return out


