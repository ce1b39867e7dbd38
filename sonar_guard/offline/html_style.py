"""The look of the HTML report: its one style sheet, its security policy, its level symbols.

Tables never break words: a cell is as wide as its longest word, numbers are right-aligned
in tabular figures, and a table wider than the page scrolls inside its own ``.wide`` box
instead of widening the page. Only headings (which may hold long paths) and prose wrap
anywhere they must. Health levels differ in word, symbol and badge shape, not only colour,
so they read the same in grey print and to colour-blind eyes.
"""
from __future__ import annotations

__all__ = ['CSP', 'CSS', 'LEVEL_SYMBOLS']

LEVEL_SYMBOLS: dict[str, str] = {
    'fine': '\u2713',      # check mark
    'degraded': '\u25b2',  # black up-pointing triangle
    'unusable': '\u2716',  # heavy multiplication x
}
"""One symbol per health level (``sonar_guard.offline.health.LEVELS``), shown beside the word."""

# No scripts, no outside requests: only inline styles and data: images may load.
CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"

CSS = """
:root { --ink: #212529; --muted: #6c757d; --rule: #dee2e6; --shade: #f8f9fa;
        --bad: #c92a2a; --warn: #e8a200; --good: #2b8a3e; }
* { box-sizing: border-box; }
body { font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif;
       color: var(--ink); margin: 0 auto; padding: 1.2em 1.4em; max-width: 1200px; }
h1 { font-size: 1.6em; margin: 0 0 .2em; overflow-wrap: anywhere; }
h2 { font-size: 1.3em; margin: 1.6em 0 .4em; border-bottom: 2px solid var(--rule);
     padding-bottom: .2em; overflow-wrap: anywhere; }
h3 { font-size: 1.05em; margin: 1.2em 0 .4em; }
p, li, figcaption, .key div { overflow-wrap: break-word; }
.meta, .muted { color: var(--muted); }
.caution { border: 2px solid var(--bad); background: #fff5f5; padding: .7em 1em;
           margin: .8em 0; border-radius: 4px; }
.skipped { border: 2px dashed #b35c00; background: #fff9db; padding: .7em 1em;
           margin: .8em 0; }
.skipped ul { margin: .2em 0 0; padding-left: 1.2em; }
.scope { font-size: 1.02em; }
.error { border-left: 5px solid var(--bad); background: #fff5f5; padding: .5em .8em; }
.notes li { margin: .15em 0; }
.wide { max-width: 100%; overflow-x: auto; }
.tables { display: flex; flex-wrap: wrap; gap: 0 2em; align-items: flex-start; }
.tables > div { max-width: 100%; }
table { border-collapse: collapse; margin: .4em 0 .8em; font-size: 12.5px; }
th, td { border: 1px solid var(--rule); padding: .25em .5em; vertical-align: top; }
th { background: var(--shade); font-weight: 600; text-align: center;
     vertical-align: bottom; }
th.num, td { text-align: right; font-variant-numeric: tabular-nums; }
td.text, th.text { text-align: left; }
td.zero { color: #adb5bd; }
td.bad { color: var(--bad); font-weight: 600; }
td.good { color: var(--good); }
td.findings { min-width: 12em; }
tr:nth-child(even) td { background: #fcfcfd; }
.nowrap { white-space: nowrap; }
.swatch { display: inline-block; width: .8em; height: .8em; border-radius: 2px;
          margin-right: .3em; vertical-align: -.05em; border: 1px solid rgba(0,0,0,.15); }
ul.health { list-style: none; padding: 0; margin: .5em 0 1em; }
ul.health > li { margin: .3em 0; padding: .35em .6em; border-left: 6px solid transparent; }
ul.health > li.lvl-degraded { border-left-color: var(--warn); background: #fff9db; }
ul.health > li.lvl-unusable { border-left: 6px double var(--bad); background: #fff5f5; }
ul.health > li.lvl-fine { padding-top: .1em; padding-bottom: .1em; }
ul.health.compact > li { padding: .15em .5em; margin: .15em 0; }
.badge { display: inline-block; font-size: 11.5px; line-height: 1.3; padding: .05em .5em;
         margin-right: .15em; white-space: nowrap; font-weight: 700; }
.badge.lvl-fine { color: var(--good); border: 1px solid var(--good); border-radius: 1em;
                  font-weight: 600; }
.badge.lvl-degraded { color: #000; background: #ffd43b; border: 2px solid #b35c00;
                      text-transform: uppercase; }
.badge.lvl-unusable { color: #fff; background: var(--bad); border: 2px solid #700;
                      text-transform: uppercase; letter-spacing: .04em; }
.advice { margin: .15em 0 0; }
.advice b { color: var(--ink); }
.rec { font-size: 1em; margin: .6em 0 .1em; overflow-wrap: anywhere; }
figure { margin: .6em 0 1.2em; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: 12.5px; margin-top: .2em; }
.key { display: grid; grid-template-columns: repeat(auto-fill, minmax(240px, 1fr));
       gap: .1em 1.2em; font-size: 12.5px; margin: .3em 0 .8em; }
nav ol { margin: .2em 0; }
nav li { overflow-wrap: anywhere; }
footer { margin-top: 2em; color: var(--muted); font-size: 12px;
         border-top: 1px solid var(--rule); padding-top: .5em; }
@media print {
  body { max-width: none; padding: 0; font-size: 11px; }
  section.bag { break-before: page; }
  figure, table, .caution, .skipped, ul.health > li { break-inside: avoid; }
  nav { display: none; }
  .wide { overflow: visible; }
}
"""
