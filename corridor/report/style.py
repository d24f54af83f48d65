"""The report's stylesheet: screen and print (A4 and Letter, landscape).

Tables wrap their text cells (ids, criteria, remedies) instead of running off
the page; numbers stay on one line. In print the page is landscape with
margins that fit both A4 (297 mm) and the narrower Letter (279.4 mm), tables
take the full width in a smaller font, their header repeats on every page,
and no row, figure or banner is split across pages.
"""

from __future__ import annotations

#: The ``@page`` rule: landscape on the printer's paper (A4 or Letter).
PAGE_RULE = "@page{size:landscape;margin:10mm 9mm 11mm 9mm}"

CSS = """
:root{--ink:#1f2328;--muted:#5b6470;--line:#d8dde3;--bg:#ffffff;--soft:#f5f7f9}
*{box-sizing:border-box}
body{margin:0;font:14px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",
 "Liberation Sans",Arial,sans-serif;color:var(--ink);background:var(--bg)}
main{max-width:1500px;margin:0 auto;padding:18px 24px 48px}
h1{font-size:24px;margin:6px 0 2px}h2{font-size:19px;margin:30px 0 8px;padding-bottom:4px;
 border-bottom:2px solid var(--line)}h3{font-size:15px;margin:18px 0 6px}
.sub{color:var(--muted);margin:0 0 12px}
.caution{border:3px solid #b8322f;background:#fff4f2;padding:12px 16px;border-radius:6px;
 font-size:15px;margin:12px 0 8px}
.caution strong{color:#8a1f1f;text-transform:uppercase;letter-spacing:.04em;margin-right:6px}
.alert{border:4px solid #8a1f1f;background:#ffe3de;padding:12px 16px;border-radius:6px;
 font-size:15px;margin:12px 0 8px}
.alert strong{display:block;color:#8a1f1f;font-size:18px;text-transform:uppercase;
 letter-spacing:.04em;margin-bottom:4px}
.alert ul{margin:6px 0 0 18px;padding:0}
dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:3px 16px;margin:8px 0}
dl.facts dt{color:var(--muted)}dl.facts dd{margin:0}
.tablewrap{overflow-x:auto;margin:6px 0 12px;max-width:100%}
table{border-collapse:collapse;font-size:12px;min-width:40%}
caption{text-align:left;color:var(--muted);padding:4px 0}
th,td{border-bottom:1px solid var(--line);padding:4px 6px;text-align:left;vertical-align:top;
 white-space:normal;overflow-wrap:normal}
td.n{white-space:nowrap;overflow-wrap:normal}
th{background:var(--soft);font-weight:600;overflow-wrap:normal}
td.n{text-align:right;font-variant-numeric:tabular-nums}
td .small,.small{color:var(--muted);font-size:11.5px}
.flag{color:#8a1f1f;font-weight:700}
.badge{display:inline-block;padding:0 7px;border-radius:9px;font-size:12px;color:#fff;
 white-space:nowrap}
.badge.clear{background:#4f9a6b}.badge.review{background:#e2a72e;color:#1f1f1f}
.badge.exceeds{background:#b8322f}.badge.not-assessed{background:#8e44ad}
figure{margin:10px 0 20px}figure svg{max-width:100%;height:auto;display:block}
figcaption{color:var(--muted);font-size:12.5px;margin-top:4px}
code{font-size:12px;background:var(--soft);padding:0 3px;border-radius:3px}
footer{color:var(--muted);font-size:12px;margin-top:36px;border-top:1px solid var(--line);
 padding-top:8px}
""" + PAGE_RULE + """
@media print{
 *{-webkit-print-color-adjust:exact;print-color-adjust:exact}
 body{font-size:10pt;line-height:1.3}
 main{max-width:none;margin:0;padding:0}
 h1{font-size:17pt}h2{font-size:13pt;margin:14pt 0 5pt;break-after:avoid}
 h3{font-size:11pt;break-after:avoid}
 .caution,.alert{font-size:10pt;padding:6pt 9pt;break-inside:avoid}
 .tablewrap{overflow:visible;margin:3pt 0 8pt}
 table{width:100%;min-width:0;font-size:7.5pt;line-height:1.25}
 th,td{padding:2pt 3pt}
 td .small,.small{font-size:7pt}
 code{font-size:7.5pt}
 thead{display:table-header-group}
 tr,figure,dl.facts{break-inside:avoid}
 caption{break-after:avoid}
 figure svg{max-width:100%;max-height:170mm;width:auto}
 figure.profile svg{max-height:82mm}
 figcaption{font-size:8pt}
 footer{font-size:8pt}
}
"""
