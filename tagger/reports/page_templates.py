"""The evaluation page's Jinja2 templates: the page, and the macros that draw a chart (inline SVG)
and its legend. Everything the page shows is inline (styles, charts; no scripts, fonts or images
fetched), so the file opens the same without a network, and its print styles keep it readable on
paper. The page's values come from `tagger.reports.page`; autoescaping is on throughout.
"""

from __future__ import annotations

CHART_MACROS = r"""
{% macro legend(entries) -%}
<ul class="legend">
{%- for entry in entries %}
  <li><svg width="22" height="12" aria-hidden="true">
  {%- if entry.marker == "circle" %}<line x1="1" y1="6" x2="21" y2="6" stroke="{{ entry.colour }}" stroke-width="2"/><circle cx="11" cy="6" r="3.5" fill="{{ entry.colour }}"/>
  {%- elif entry.marker == "triangle" %}<line x1="1" y1="6" x2="21" y2="6" stroke="{{ entry.colour }}" stroke-width="2"/><path d="M11,2 L15,10 L7,10 Z" fill="{{ entry.colour }}"/>
  {%- elif entry.marker == "dot" %}<circle cx="11" cy="6" r="3.5" fill="{{ entry.colour }}"/>
  {%- elif entry.marker == "line" %}<line x1="1" y1="6" x2="21" y2="6" stroke="{{ entry.colour }}" stroke-width="2"/>
  {%- elif entry.marker == "dashed-line" %}<line x1="1" y1="6" x2="21" y2="6" stroke="{{ entry.colour }}" stroke-width="2" stroke-dasharray="4,3"/>
  {%- elif entry.marker == "dash" %}<line x1="11" y1="0" x2="11" y2="12" stroke="{{ entry.colour }}" stroke-dasharray="3,2"/>
  {%- elif entry.marker == "pale" %}<rect x="4" y="1" width="14" height="10" fill="{{ entry.colour }}" fill-opacity="0.2" stroke="#999999"/>
  {%- elif entry.marker == "square" and entry.colour == "#ffffff" %}<rect x="4" y="1" width="14" height="10" fill="#ffffff" stroke="#999999"/>
  {%- else %}<rect x="4" y="1" width="14" height="10" fill="{{ entry.colour }}"/>
  {%- endif %}</svg>{{ entry.label }}</li>
{%- endfor %}
</ul>
{%- endmacro %}

{% macro chart(c, name, description) -%}
<figure class="chart" data-chart="{{ name }}">
<svg role="img" aria-label="{{ description }}" width="{{ c.width }}" height="{{ c.height }}" viewBox="0 0 {{ c.width }} {{ c.height }}">
<title>{{ description }}</title>
{%- for l in c.lines %}
<line x1="{{ l.x1 }}" y1="{{ l.y1 }}" x2="{{ l.x2 }}" y2="{{ l.y2 }}" class="{{ l.kind }}"/>
{%- endfor %}
{%- for r in c.rects %}
<rect x="{{ r.x }}" y="{{ r.y }}" width="{{ r.width }}" height="{{ r.height }}" fill="{{ r.fill }}"
{%- if r.opacity is defined %} fill-opacity="{{ r.opacity }}"{% endif %}
{%- if r.stroke is defined %} stroke="{{ r.stroke }}"{% endif %}><title>{{ r.title }}</title></rect>
{%- endfor %}
{%- for p in c.paths %}
<path d="{{ p.d }}" fill="none" stroke="{{ p.stroke }}" stroke-width="2"{% if p.get("dashed") %} stroke-dasharray="5,4"{% endif %}><title>{{ p.title }}</title></path>
{%- endfor %}
{%- for m in c.marks %}
{%- if m.marker == "circle" %}<circle cx="{{ m.x }}" cy="{{ m.y }}" r="3.5" fill="{{ m.colour }}"/>
{%- elif m.marker == "square" %}<rect x="{{ m.x - 3 }}" y="{{ m.y - 3 }}" width="6" height="6" fill="{{ m.colour }}"/>
{%- else %}<path d="M{{ m.x }},{{ m.y - 4 }} L{{ m.x + 4 }},{{ m.y + 3 }} L{{ m.x - 4 }},{{ m.y + 3 }} Z" fill="{{ m.colour }}"/>
{%- endif %}
{%- endfor %}
{%- for t in c.texts %}
<text x="{{ t.x }}" y="{{ t.y }}" text-anchor="{{ t.anchor }}"
{%- if t.get("turned") %} transform="rotate(-40 {{ t.x }} {{ t.y }})"{% endif %}
{%- if t.get("small") or t.get("light") %} class="{{ "small" if t.get("small") else "" }}{{ " light" if t.get("light") else "" }}"{% endif %}>{{ t.text }}</text>
{%- endfor %}
</svg>
<figcaption>{{ legend(c.legend) }}</figcaption>
</figure>
{%- endmacro %}
"""

PAGE = r"""{% from "charts" import chart, legend %}<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{{ title }}</title>
{% include "style" %}
</head>
<body>
<header>
<h1>{{ title }}</h1>
<p class="sub">{{ files | join(", ") }} &middot; {{ sentences }} sentences &middot; model labels in {{ scheme }}</p>
</header>

<section id="headline">
<h2>In short</h2>
<div class="headline">
  <div>span F1<b>{{ "%.3f" | format(micro.f1) }}</b>{% if interval %}<span class="where">{{ interval }}</span>{% endif %}</div>
  <div>precision<b>{{ "%.3f" | format(micro.precision) }}</b></div>
  <div>recall<b>{{ "%.3f" | format(micro.recall) }}</b></div>
  <div>spans in gold<b>{{ "{:,}".format(micro.gold) }}</b></div>
  <div>spans tagged<b>{{ "{:,}".format(micro.predicted) }}</b></div>
</div>
</section>

<section id="per-type">
<h2>Each type's scores</h2>
<table class="per-type">
<thead><tr><th>type</th><th>precision</th><th>recall</th><th>F1</th><th>in gold</th><th>tagged</th><th>right</th></tr></thead>
<tbody>
{%- for type, s in per_type.items() %}
<tr><th>{{ type }}</th><td class="n">{{ "%.3f" | format(s.precision) }}</td><td class="n">{{ "%.3f" | format(s.recall) }}</td><td class="n">{{ "%.3f" | format(s.f1) }}</td><td class="n">{{ "{:,}".format(s.gold) }}</td><td class="n">{{ "{:,}".format(s.predicted) }}</td><td class="n">{{ "{:,}".format(s.correct) }}</td></tr>
{%- endfor %}
<tr><th>all spans</th><td class="n">{{ "%.3f" | format(micro.precision) }}</td><td class="n">{{ "%.3f" | format(micro.recall) }}</td><td class="n">{{ "%.3f" | format(micro.f1) }}</td><td class="n">{{ "{:,}".format(micro.gold) }}</td><td class="n">{{ "{:,}".format(micro.predicted) }}</td><td class="n">{{ "{:,}".format(micro.correct) }}</td></tr>
</tbody>
</table>
{{ chart(score_chart, "scores", "Precision, recall and F1 of each type") }}
</section>

<section id="outcomes">
<h2>Where each type's spans ended up</h2>
<p>Each bar holds a type's gold spans, split by what the model made of them, followed by the spans it
tagged where gold has none.</p>
{{ chart(outcome_chart, "outcomes", "Gold spans of each type by outcome, then tagged spans not in gold") }}
</section>

<section id="confusion">
<h2>Which type a span got instead</h2>
{%- if confusion_chart %}
<p>Spans whose edges the model found but whose type it got wrong: read a row as the gold type, a column
as the type the model gave.</p>
{{ chart(confusion_chart, "confusion", "Gold type against the type tagged with the same edges") }}
{%- else %}
<p class="note">No span had the right edges and another type.</p>
{%- endif %}
</section>

<section id="training">
<h2>How training went</h2>
{%- if curve_chart %}
<p>Dev scores after each epoch, from {{ history_name }} beside the model.</p>
{{ chart(curve_chart, "training", "Dev precision, recall and F1 by epoch") }}
{%- else %}
<p class="note">{{ history_note }}</p>
{%- endif %}
</section>

<section id="worst">
<h2>Sentences with the most errors</h2>
{%- if worst %}
<p>Gold spans above, the model's below; a dashed box is a span the other side does not have.</p>
{{ legend(type_legend) }}
{%- for s in worst %}
<div class="sentence">
<div class="where">{{ s.file }}:{{ s.line }} &middot; {{ s.errors }} span{{ "" if s.errors == 1 else "s" }} wrong</div>
{%- for side, parts in (("gold", s.gold), ("model", s.tagged)) %}
<p><span class="side">{{ side }}</span>
{%- for part in parts %} {% if part.type %}<span class="span{{ '' if part.right else ' wrong' }}" style="border-color: {{ part.colour }}">{{ part.text }}<sub>{{ part.type }}</sub></span>{% else %}{{ part.text }}{% endif %}
{%- endfor %}</p>
{%- endfor %}
</div>
{%- endfor %}
{%- else %}
<p class="note">Every sentence was tagged exactly as in gold.</p>
{%- endif %}
</section>

<footer><p class="where">Written by tagger {{ version }}.</p></footer>
</body>
</html>
"""

STYLE = r"""<style>
:root { color-scheme: light; }
body { font: 15px/1.45 system-ui, sans-serif; color: #1a1a1a; background: #ffffff;
       max-width: 62rem; margin: 1.5rem auto; padding: 0 1rem; }
h1 { font-size: 1.5rem; margin-bottom: .2rem; }
h2 { font-size: 1.15rem; border-bottom: 2px solid #1a1a1a; padding-bottom: .15rem; margin-top: 2rem; }
.sub { color: #444444; margin-top: 0; }
.headline { display: flex; gap: 1.5rem; flex-wrap: wrap; margin: 1rem 0; }
.headline div { border: 1px solid #999999; padding: .4rem .8rem; min-width: 7rem; }
.headline b { display: block; font-size: 1.4rem; }
table { border-collapse: collapse; margin: .6rem 0; }
th, td { padding: .2rem .6rem; border-bottom: 1px solid #cccccc; }
th { text-align: left; } td.n { text-align: right; font-variant-numeric: tabular-nums; }
svg text { font: 12px system-ui, sans-serif; fill: #1a1a1a; }
svg text.small { font-size: 10px; } svg text.light { fill: #ffffff; }
svg line.grid { stroke: #dddddd; } svg line.interval { stroke: #D55E00; stroke-width: 2; }
svg line.spread { stroke: #000000; stroke-width: 2; } svg line.best { stroke: #000000; stroke-dasharray: 4,3; }
figure.chart { margin: .6rem 0 1.2rem; }
ul.legend { list-style: none; padding: 0; margin: .3rem 0; display: flex; flex-wrap: wrap; gap: .3rem 1.1rem; font-size: 13px; }
ul.legend li { display: flex; align-items: center; gap: .3rem; }
.sentence { border-left: 3px solid #999999; padding: .3rem .7rem; margin: .8rem 0; }
.sentence p { margin: .2rem 0; line-height: 2.1; }
.where { font-size: 13px; color: #444444; }
.side { display: inline-block; width: 4.2rem; font-size: 12px; color: #444444; }
.span { border: 2px solid; border-radius: 3px; padding: 0 .15rem; }
.span.wrong { border-style: dashed; background: #f4f4f4; }
.span sub { font-size: 10px; font-weight: 600; margin-left: .15rem; }
.note { color: #444444; font-style: italic; }
@media print {
  body { max-width: none; margin: 0; font-size: 11pt; }
  section, figure, .sentence, table { break-inside: avoid; }
  h2 { break-after: avoid; }
  .span.wrong { background: none; }
}
</style>"""

CURVE_PAGE = r"""{% from "charts" import chart %}<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{{ title }}</title>
{% include "style" %}
</head>
<body>
<header>
<h1>{{ title }}</h1>
<p class="sub">{{ training_file }} ({{ training_sentences }} sentences) &middot; each model scored on {{ scored_file }}</p>
</header>

<section id="answer">
<h2>The answer</h2>
<p class="answer">{{ answer }}</p>
{%- if fit %}
<p class="where">Fitted curve: F1(n) = {{ "%.3f" | format(fit.a) }} &minus; {{ "%.4g" | format(fit.b) }} &times; n<sup>&minus;{{ "%.3f" | format(fit.c) }}</sup>, n the training sentences.</p>
{%- endif %}
</section>

<section id="curve">
<h2>Span F1 by training sentences</h2>
{%- if curve_chart %}
{{ chart(curve_chart, "learning-curve", "Span F1 of each model by its training sentences, with the fitted curve") }}
{%- else %}
<p class="note">No model was trained: every share was left out (see the warnings).</p>
{%- endif %}
</section>

<section id="points">
<h2>Each model</h2>
<table class="points">
<thead><tr><th>share of train</th><th>seed</th><th>sentences</th><th>span F1</th><th>best epoch</th></tr></thead>
<tbody>
{%- for p in points %}
<tr><th>{{ "{:.0%}".format(p.fraction) }}</th><td class="n">{{ p.seed }}</td><td class="n">{{ "{:,}".format(p.sentences) }}</td><td class="n">{{ "%.3f" | format(p.f1) }}</td><td class="n">{{ p.best_epoch }}</td></tr>
{%- endfor %}
</tbody>
</table>
</section>
{%- if warnings %}

<section id="warnings">
<h2>Warnings</h2>
<ul>
{%- for warning in warnings %}
<li>{{ warning }}</li>
{%- endfor %}
</ul>
</section>
{%- endif %}

<footer><p class="where">Written by tagger {{ version }}.</p></footer>
</body>
</html>
"""

FOLDS_PAGE = r"""{% from "charts" import chart %}<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{{ title }}</title>
{% include "style" %}
</head>
<body>
<header>
<h1>{{ title }}</h1>
<p class="sub">{{ training_file }} &middot; {{ sentences }} sentences &middot; {{ k }} folds, {{ how }}</p>
</header>

<section id="spread">
<h2>Span F1 on the fold each model did not train on</h2>
{{ chart(spread_chart, "folds", "Span F1 of each type over the folds: mean, spread and each fold") }}
</section>

<section id="per-type">
<h2>Each type over the folds</h2>
<table class="per-type">
<thead><tr><th>type</th><th>mean F1</th><th>standard deviation</th><th>lowest</th><th>highest</th>
{%- for n in range(1, k + 1) %}<th>fold {{ n }}</th>{% endfor %}<th>in gold</th></tr></thead>
<tbody>
{%- for name, e in rows.items() %}
<tr><th>{{ name }}</th>
{%- for value in (e.mean, e.sd, e.min, e.max) %}<td class="n">{{ "-" if value is none else "%.3f" | format(value) }}</td>{% endfor %}
{%- for value in e.f1_per_fold %}<td class="n">{{ "-" if value is none else "%.3f" | format(value) }}</td>{% endfor %}
<td class="n">{{ "{:,}".format(e.gold) }}</td></tr>
{%- endfor %}
</tbody>
</table>
</section>
{%- if warnings %}

<section id="warnings">
<h2>Warnings</h2>
<ul>
{%- for warning in warnings %}
<li>{{ warning }}</li>
{%- endfor %}
</ul>
</section>
{%- endif %}

<footer><p class="where">Written by tagger {{ version }}.</p></footer>
</body>
</html>
"""
