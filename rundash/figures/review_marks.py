"""The engineer's review drawn on the Bode and polar plots (pure: plain dicts in, the
figure out): annotations at their speed, criticals the engineer added or corrected, and
automatic criticals the engineer rejected. Only shapes and annotations are added, never
traces, so the data traces, critical markers and cursors keep their places."""

from __future__ import annotations

from typing import Any

import plotly.graph_objects as go

ENGINEER = "#CC79A7"  # reddish purple of the Okabe-Ito palette: the engineer's entries


def _mine(rows, probe: str):
    return [r for r in rows if not r.get("probe") or r.get("probe") == probe]


def mark_review(fig, review: dict[str, Any] | None, probe: str, *, plot: str) -> go.Figure:
    """A copy of ``fig`` (a Bode or polar figure of ``probe``) with the review marks."""
    fig = go.Figure(fig)
    if not review:
        return fig
    notes = [a for a in _mine(review.get("annotations", []), probe) if a.get("plot") == plot]
    crits = [c for c in review.get("criticals", []) + review.get("added", [])
             if c.get("probe") == probe]
    if plot == "bode":
        for a in notes:
            if a.get("speed_rpm") is None:
                continue
            fig.add_shape(type="line", xref="x", yref="y domain", x0=a["speed_rpm"],
                          x1=a["speed_rpm"], y0=0, y1=1,
                          line={"color": ENGINEER, "dash": "dot", "width": 1.5})
            fig.add_annotation(xref="x", yref="y domain", x=a["speed_rpm"], y=0.02,
                               text=f"✎ {a['text']} ({a['by']})", showarrow=False,
                               xanchor="left", yanchor="bottom", textangle=-90,
                               font={"size": 11, "color": ENGINEER}, name="review-note")
        for c in crits:
            if c["source"] == "engineer" and c.get("speed_rpm") is not None:
                af = f", AF {c['af']:.2f}" if c.get("af") is not None else ""
                fig.add_shape(type="line", xref="x", yref="y domain", x0=c["speed_rpm"],
                              x1=c["speed_rpm"], y0=0, y1=1,
                              line={"color": ENGINEER, "dash": "dash", "width": 2})
                fig.add_annotation(xref="x", yref="y domain", x=c["speed_rpm"], y=0.98,
                                   text=f"engineer: {c['speed_rpm']:,.0f} rpm{af} "
                                        f"({c['decision']})", showarrow=False,
                                   xanchor="left", yanchor="top",
                                   font={"size": 11, "color": ENGINEER},
                                   name="review-critical")
            elif c.get("decision") == "rejected" and c.get("automatic"):
                fig.add_annotation(xref="x", yref="y domain", x=c["automatic"]["speed_rpm"],
                                   y=0.90, text=f"rejected: {c['reason']}", showarrow=False,
                                   xanchor="left", yanchor="top",
                                   font={"size": 11, "color": ENGINEER},
                                   name="review-rejected")
    else:
        lines = [f"✎ at {a['speed_rpm']:,.0f} rpm: {a['text']} ({a['by']})" for a in notes
                 if a.get("speed_rpm") is not None]
        lines += [f"engineer: {c['speed_rpm']:,.0f} rpm ({c['decision']})" for c in crits
                  if c["source"] == "engineer" and c.get("speed_rpm") is not None]
        if lines:
            fig.add_annotation(xref="paper", yref="paper", x=0, y=0, xanchor="left",
                               yanchor="bottom", showarrow=False, align="left",
                               text="<br>".join(lines), name="review-note",
                               font={"size": 11, "color": ENGINEER})
    return fig
