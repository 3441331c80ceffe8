"""The dashboard's look: one small style sheet of our own, embedded in the page.

Light, calm and printable: dark grey ink on white, one blue accent, verdict colours from
the Okabe-Ito colour-blind-safe set and always written out in words as well.
"""

CSS = """
:root { --ink:#2b2b2b; --muted:#666; --line:#dcdcdc; --accent:#0072B2; --bg:#f6f7f8;
        --pass:#009E73; --fail:#D55E00; --attention:#E69F00; --unjudged:#777; }
* { box-sizing: border-box; }
body { margin:0; font-family: Inter, 'Segoe UI', Arial, sans-serif; color:var(--ink);
       background:var(--bg); font-size:14px; }
a { color: var(--accent); }
.shell-head { display:flex; align-items:baseline; gap:28px; padding:10px 24px;
              background:white; border-bottom:1px solid var(--line); }
.shell-head .brand { font-weight:700; font-size:18px; letter-spacing:0.02em; }
.shell-head nav a { margin-right:18px; text-decoration:none; font-weight:500; }
.shell-main { padding:16px 24px 72px 24px; max-width:1500px; margin:0 auto; }
.caution { position:fixed; bottom:0; left:0; right:0; background:#fff8e6;
           border-top:1px solid #e6c77a; padding:6px 24px; font-size:12px; z-index:10; }
.card { background:white; border:1px solid var(--line); border-radius:6px; padding:14px 18px;
        margin-bottom:16px; }
.card h2, .card h3 { margin:0 0 8px 0; }
.muted { color:var(--muted); }
.grid2 { display:grid; grid-template-columns: 3fr 2fr; gap:16px; }
.grid2eq { display:grid; grid-template-columns: 1fr 1fr; gap:16px; }
@media (max-width: 1100px) { .grid2, .grid2eq { grid-template-columns: 1fr; } }
table.plain { border-collapse:collapse; width:100%; }
table.plain th, table.plain td { text-align:left; padding:5px 8px; border-bottom:1px solid var(--line);
                                 vertical-align:top; }
table.plain th { font-weight:600; background:#fafafa; }
tr.clickable { cursor:pointer; } tr.clickable:hover { background:#e6f0f8; }
td.v-pass, td.v-within { color:#00704f; font-weight:600; }
td.v-fail, td.v-exceeds { color:#b34700; font-weight:700; }
td.v-reference-only, td.v-not-judged { color:var(--unjudged); }
tr.row-fail { background:#fdf0e8; } tr.row-fail:hover { background:#fbe3d4; }
.reasons { background:#fdf0e8; border-left:4px solid var(--fail); padding:6px 12px; margin:6px 0 10px 0; }
.reasons ul { margin:4px 0; padding-left:20px; }
.attention { background:#fff6e0; border-left:4px solid var(--attention); padding:4px 12px; margin:6px 0; }
.attention ul { margin:4px 0; padding-left:20px; }
details.reference { margin-top:8px; border:1px solid var(--line); border-radius:4px; padding:4px 10px; }
details.reference summary { cursor:pointer; color:var(--muted); padding:4px 0; }
details.reference table td { color:var(--muted); }
.badge { display:inline-block; padding:2px 9px; border-radius:10px; font-weight:600;
         font-size:12px; color:white; background:var(--unjudged); }
.badge.pass { background:var(--pass); } .badge.fail { background:var(--fail); }
.badge.attention { background:var(--attention); color:#222; }
.badge.big { font-size:16px; padding:4px 14px; }
.controls { display:flex; flex-wrap:wrap; gap:22px; align-items:flex-end; }
.controls label.head { display:block; font-size:12px; color:var(--muted); margin-bottom:3px; }
.note { font-size:12px; color:var(--muted); }
.warn { background:#fff3e8; border-left:4px solid var(--fail); padding:6px 10px; margin:6px 0; }
.error { background:#fdecea; border-left:4px solid var(--fail); padding:8px 12px; }
.ok { background:#e8f6f1; border-left:4px solid var(--pass); padding:8px 12px; }
.alert-strip { display:flex; flex-wrap:wrap; gap:8px; margin:0 0 12px 0; min-height:30px; }
.alert { display:inline-block; padding:5px 12px; border-radius:4px; font-size:13px;
         border-left:4px solid var(--unjudged); background:white; }
.alert.alarm { background:#fdecea; border-left-color:var(--fail); color:#7a2e00; }
.alert.warning { background:#fff6e0; border-left-color:var(--attention); }
.alert.info { background:#eef5fa; border-left-color:var(--accent); }
.alert.none { color:var(--muted); border-left-color:var(--line); background:transparent; }
.live-page .row { display:flex; gap:16px; }
table.events { border-collapse:collapse; width:100%; background:white; }
table.events th, table.events td { text-align:left; padding:4px 8px;
                                   border-bottom:1px solid var(--line); font-size:13px; }
.standing { background:#f3f5f7; border-left:4px solid var(--line); padding:6px 10px;
            margin:6px 0; color:var(--ink); }
.drop { border:2px dashed #b8c4cc; border-radius:6px; padding:18px; text-align:center;
        background:#fbfcfd; cursor:pointer; }
.progress { height:10px; background:#e8e8e8; border-radius:5px; overflow:hidden; }
.progress > div { height:100%; background:var(--accent); transition: width 0.3s; }
@media print { .caution { position:static; } .shell-head nav, .controls { display:none; }
               body { background:white; } }
"""

INDEX = """<!DOCTYPE html>
<html>
  <head>
    {%metas%}
    <title>{%title%}</title>
    {%favicon%}
    {%css%}
    <style>""" + CSS + """</style>
  </head>
  <body>
    {%app_entry%}
    <footer>{%config%}{%scripts%}{%renderer%}</footer>
  </body>
</html>
"""
