"""The report's review parts: the engineer's decisions beside the automatic readings, the
annotations, and the sign-off block filled from the stored sign-off."""

from __future__ import annotations

from html import escape
from typing import Any

from rundash import CAUTION
from rundash.workflows.review import SIGN_OFF_DECISIONS


def _e(x: Any) -> str:
    return escape("" if x is None else str(x))


def _n(x: Any, fmt: str = "{:,.0f}") -> str:
    return "–" if x is None else fmt.format(x)


def has_review(review: dict[str, Any] | None) -> bool:
    return bool(review) and review.get("state") not in ("processed", "not processed")


def verdict_line(review: dict[str, Any] | None) -> str:
    """One sentence under the automatic verdict: the verdict after the review, its state."""
    if not has_review(review):
        return ""
    return (f"<p>Run verdict after the engineer's review: <b>{_e(review['run_verdict'])}</b>"
            f" (review state: {_e(review['state'])})</p>")


def review_section(review: dict[str, Any] | None, number: int) -> str:
    """Section ``number``: decisions (automatic reading beside the decided one), criticals
    the engineer added, annotations, notes."""
    if not has_review(review):
        return ""
    head = ("probe", "direction", "automatic rpm", "automatic AF", "automatic verdict",
            "decision", "decided rpm", "decided AF", "margin", "verdict", "by, when")
    rows = []
    for c in review["criticals"] + review["added"]:
        a = c.get("automatic") or {}
        eng = c["source"] == "engineer"
        who = f"{c.get('by', '')}, {str(c.get('at') or '')[:16].replace('T', ' ')}"
        if c.get("earlier_processing"):
            who += " (on an earlier processing)"
        cells = (c["probe"], c["direction"], _n(a.get("speed_rpm")),
                 _n(a.get("af"), "{:.2f}"), a.get("margin_verdict") or "–",
                 c["decision"] + (f": {c['reason']}" if c.get("reason") else "")
                 + (f" — {c['note']}" if c.get("note") else ""),
                 _n(c["speed_rpm"]) + (" *" if eng else ""), _n(c["af"], "{:.2f}"),
                 _n(c.get("separation_margin_pct"), "{:.1f} %"), c.get("margin_verdict") or "–",
                 who if c["decision"] != "undecided" else "–")
        rows.append("<tr>" + "".join(f"<td>{_e(x)}</td>" for x in cells) + "</tr>")
    out = [f"<h2>{number}. The engineer's review</h2>",
           f"<p>Automatic verdict: {_e(review['automatic_verdict'])}; verdict recomputed "
           f"from the decided set: <b>{_e(review['run_verdict'])}</b>. "
           "* marks a speed that is the engineer's. Results processed at "
           f"{_e(review['processing_at'])}.</p>",
           "<table><tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>"
           + "".join(rows) + "</table>"]
    if review["annotations"]:
        out.append("<h3>Annotations</h3><ul>" + "".join(
            f"<li class='annotation'>{_e(a['plot'])}{' ' + _e(a['probe']) if a['probe'] else ''}"
            f" at {_n(a['speed_rpm'])} rpm: {_e(a['text'])} ({_e(a['by'])})</li>"
            for a in review["annotations"]) + "</ul>")
    if review["unmatched"]:
        out.append("<p>Decisions matching no current critical (made on an earlier "
                   "processing; they do not count): " + "; ".join(
                       f"{_e(u['action'])} {_e(u['probe'])} {_n(u['speed_rpm'])} rpm by "
                       f"{_e(u['by'])}" for u in review["unmatched"]) + "</p>")
    if review["notes"]:
        out.append("<ul>" + "".join(f"<li>{_e(n)}</li>" for n in review["notes"]) + "</ul>")
    return "".join(out)


def stored_signoff(review: dict[str, Any] | None, *, typed: bool = False) -> str:
    """The sign-off block filled from the stored sign-off, or "" when there is none;
    ``typed``: reviewer fields were given for this report (they are not used, and the
    block says so)."""
    s = (review or {}).get("sign_off")
    if not s:
        return ""
    opts = SIGN_OFF_DECISIONS
    boxes = "".join(f'<span class="box{" x" if s["decision"] == o else ""}"></span>{_e(o)}'
                    for o in opts)
    where = ("" if s.get("current") else
             f'<p class="earlier"><b>{_e(s["note"])}</b></p>')
    snap = s.get("snapshot") or {}
    return (
        '<h2>Sign-off</h2><div class="signoff" id="signoff-record"><table>'
        f'<tr><th>Reviewer</th><td><span class="line">{_e(s["name"])}</span></td></tr>'
        f'<tr><th>Role</th><td><span class="line">{_e(s["role"]) or "&nbsp;"}</span></td></tr>'
        f'<tr><th>Date</th><td><span class="line">{_e(s["signed_on"])}</span></td></tr>'
        f'<tr><th>Decision</th><td>{boxes}</td></tr>'
        f'<tr><th>Remarks</th><td><span class="line" style="min-width:520px">'
        f'{_e(s["remarks"]) or "&nbsp;"}</span></td></tr>'
        f'<tr><th>Signed verdict</th><td>{_e(snap.get("run_verdict"))} (automatic '
        f'{_e(snap.get("automatic_verdict"))})</td></tr>'
        f'<tr><th>Record</th><td>recorded {_e(str(s["created_at"])[:19].replace("T", " "))} '
        f'UTC on the processing of {_e(s["processing_at"])}; entry {_e(s["uid"])}</td></tr>'
        '</table>' + where
        + ('<p class="small">The run has a stored sign-off: this block shows it; the '
           'reviewer fields given for this report are not used.</p>' if typed else "")
        + f'<p class="small">{_e(review["record_note"])}</p>'
        f'<p class="small">{_e(CAUTION)}</p></div>')
