"""The page script of the scenario explorer, the project search and the drill-down.

It reads two JSON blocks (``explorer-data`` from :func:`ratescape.report.explorer.explorer_data` and
``drill-templates`` from :func:`ratescape.report.drill_charts.drill_templates`) and writes the page
with DOM methods only (``textContent``, ``createElement``): no user text ever goes through HTML
parsing. No network: everything it draws is in the page.
"""

EXPLORER_JS = r"""
(function () {
  'use strict';
  var errors = window.__ratescapeErrors || [];
  function $(id) { return document.getElementById(id); }
  var D = JSON.parse($('explorer-data').textContent);
  var T = JSON.parse($('drill-templates').textContent);
  var P = D.pr, S = D.sc;
  // worths travel as four significant digits: worth = code x 10^e (explorer.worth_codes)
  function decode(codes, e) {
    var f = Math.pow(10, e);
    return codes.map(function (c) { return c === null ? null : c * f; });
  }
  Object.keys(D.pw).forEach(function (k) { D.pw[k] = decode(D.pw[k], D.pwe[k]); });
  if (D.toppw) D.toppw = D.toppw.map(function (row, s) { return decode(row, D.toppwe[s]); });
  function isSelected(s, i) {      // selections are hex bit strings, project i in bit i % 4
    var c = D.selected[s].charAt(i >> 2);
    return c !== '' && ((parseInt(c, 16) >> (i & 3)) & 1) === 1;
  }
  function worth4(v) {     // four significant digits, in thousands (k) or millions (M)
    if (v === null || v === undefined) return '\u2014';
    var a = Math.abs(v), o = {maximumSignificantDigits: 4};
    if (a >= 1e6) return (v / 1e6).toLocaleString('en-US', o) + ' M';
    if (a >= 1e3) return (v / 1e3).toLocaleString('en-US', o) + ' k';
    return v.toLocaleString('en-US', o);
  }
  function short(v) {
    if (v === null || v === undefined) return '\u2014';
    var a = Math.abs(v);
    if (a >= 1e6) return (v / 1e6).toLocaleString('en-US', {maximumFractionDigits: 1}) + ' M';
    if (a >= 1e3) return (v / 1e3).toLocaleString('en-US', {maximumFractionDigits: 1}) + ' k';
    return v.toLocaleString('en-US', {maximumFractionDigits: 1});
  }
  function pct(v, d) { return (v === null || v === undefined) ? '\u2014' : (v * 100).toFixed(d === undefined ? 2 : d) + ' %'; }
  function label(i) { return P.name[i] ? P.name[i] + ' (' + P.id[i] + ')' : P.id[i]; }
  function el(tag, text, cls) {
    var e = document.createElement(tag);
    if (text !== undefined && text !== null) e.textContent = String(text);
    if (cls) e.className = cls;
    return e;
  }
  function current() {
    var key = D.axes.map(function (a) {
      var c = document.querySelector('[data-axis="' + a.key + '"]');
      if (c.hasAttribute('data-nominal-of-real')) {
        var o = c.options[c.selectedIndex];
        return o ? +o.getAttribute('data-real-index') : -1;
      }
      var v = parseFloat(c.value), best = 0;
      a.values.forEach(function (w, i) { if (Math.abs(w - v) < Math.abs(a.values[best] - v)) best = i; });
      return best;
    }).join(',');
    return D.cells.hasOwnProperty(key) ? D.cells[key] : null;
  }
  function ranking(s) {
    var rows = [];
    if (D.full) {
      for (var k in D.pw) { if (D.pw[k][s] !== null) rows.push([+k, D.pw[k][s]]); }
      rows.sort(function (a, b) {
        var d = b[1] - a[1];
        if (Math.abs(d) > 1e-9 * Math.max(Math.abs(a[1]), Math.abs(b[1]))) return d;
        return P.id[a[0]] < P.id[b[0]] ? -1 : (P.id[a[0]] > P.id[b[0]] ? 1 : 0);
      });
      var fix = D.fix && D.fix[String(s)];
      if (fix) {      // where rounding ties or reorders, the stored order of that stretch
        for (var j = 1; j < fix.length; j++) rows[fix[0] + j - 1] = [fix[j], D.pw[String(fix[j])][s]];
      }
    } else {
      rows = D.top[s].map(function (i, j) { return [i, D.toppw[s][j]]; });
    }
    return rows.map(function (r) { return {i: r[0], pw: r[1], sel: isSelected(s, r[0])}; });
  }
  function update() {
    var s = current();
    var body = $('scenario-ranking').tBodies[0];
    while (body.firstChild) body.removeChild(body.firstChild);
    var note = $('scenario-summary');
    if (s === null) { note.textContent = 'No stored scenario at these settings.'; return; }
    var real = S.real[s];
    $('scenario-nominal').textContent = pct(S.nominal[s]);
    $('scenario-real').textContent = pct(real);
    $('negative-real').hidden = !(real < 0);
    $('accepted-count').textContent = S.accepted[s].toLocaleString('en-US');
    $('portfolio-worth').textContent = S.worth[s] === null ? 'no budget-limited portfolio' : short(S.worth[s]);
    ranking(s).forEach(function (r, j) {
      var tr = document.createElement('tr');
      tr.setAttribute('data-project-id', P.id[r.i]);
      tr.appendChild(el('td', j + 1, 'num'));
      var name = el('td'); var a = el('a', label(r.i)); a.href = '#project-detail';
      a.addEventListener('click', function () { openProject(r.i); });
      name.appendChild(a); tr.appendChild(name);
      tr.appendChild(el('td', worth4(r.pw), 'num'));
      tr.appendChild(el('td', r.pw >= 0 ? 'yes' : 'no'));
      tr.appendChild(el('td', S.worth[s] === null ? '\u2014' : (r.sel ? 'yes' : 'no')));
      body.appendChild(tr);
    });
    $('scenario-ranking').setAttribute('data-scenario-id', S.id[s]);
  }
  // real-basis runs: the discount_rate control lists the stored nominal rates at the chosen
  // inflation level (its options rebuilt when inflation changes, the real rate kept)
  var nominalControl = document.querySelector('[data-nominal-of-real]');
  function rebuildNominal() {
    var infl = document.querySelector('[data-axis="inflation"]'), v = parseFloat(infl.value);
    var levels = D.axes[1].values, iy = 0;
    levels.forEach(function (w, i) { if (Math.abs(w - v) < Math.abs(levels[iy] - v)) iy = i; });
    var o = nominalControl.options[nominalControl.selectedIndex];
    var keep = o ? +o.getAttribute('data-real-index') : -1;
    while (nominalControl.firstChild) nominalControl.removeChild(nominalControl.firstChild);
    D.nominal_at[iy].forEach(function (text, j) {
      if (text === null) return;
      var opt = el('option', pct(parseFloat(text)) + ' (real ' + pct(D.axes[0].values[j]) + ')');
      opt.value = text;
      opt.setAttribute('data-real-index', String(j));
      if (j === keep) opt.selected = true;
      nominalControl.appendChild(opt);
    });
  }
  function changed(e) {
    if (nominalControl && e.target.getAttribute('data-axis') === 'inflation') rebuildNominal();
    update();
  }
  Array.prototype.forEach.call(document.querySelectorAll('[data-axis]'), function (c) {
    c.addEventListener('change', changed); c.addEventListener('input', changed);
  });
  // ---- search and drill-down
  var views = [];
  function clearViews() { views.forEach(function (v) { try { v.finalize(); } catch (e) {} }); views = []; }
  function spec(kind, datasets, title) {
    var s = JSON.parse(JSON.stringify(T[kind]));
    s.datasets = datasets;
    s.title = title;
    return s;
  }
  // The drill-down opened with the page is drawn when its charts come within 200 px of the window
  // (or the page is printed); one the reader asks for (search, a name in the table) is drawn at once.
  var deferredDrill = null;
  var drillObserver = null;
  function openProject(i, lazy) {
    var box = $('project-detail');
    var k = String(i);
    var head = $('detail-title'); head.textContent = label(i);
    var facts = $('detail-facts');
    while (facts.firstChild) facts.removeChild(facts.firstChild);
    [['Share of scenarios accepted', pct(P.share[i], 1)],
     ['Rank range (1 = highest present worth)', P.rmin[i] === null ? '\u2014' : P.rmin[i] + ' to ' + P.rmax[i] + ' (median ' + P.rmed[i] + ')'],
     ['Share of scenarios selected in the budget-limited portfolio', pct(P.sel[i], 1)]].forEach(function (f) {
      var li = el('li'); li.appendChild(el('strong', f[0] + ': ')); li.appendChild(document.createTextNode(f[1])); facts.appendChild(li);
    });
    box.setAttribute('data-project-id', P.id[i]);
    clearViews();
    var charts = $('detail-charts');
    if (!D.pw.hasOwnProperty(k)) {
      box.setAttribute('data-rendered', '0');
      charts.hidden = true;
      $('detail-missing').hidden = false;
      $('detail-missing-id').textContent = P.id[i];
      return;
    }
    charts.hidden = false; $('detail-missing').hidden = true;
    deferredDrill = null;
    if (lazy && 'IntersectionObserver' in window) {
      deferredDrill = i;
      box.setAttribute('data-rendered', 'deferred');
      if (!drillObserver) {
        drillObserver = new IntersectionObserver(function (entries) {
          if (entries.some(function (e) { return e.isIntersecting; })) drawDeferredDrill();
        }, {rootMargin: '200px 0px'});
      }
      drillObserver.observe(charts);
      return;
    }
    drawDrill(i);
  }
  function drawDeferredDrill() {
    if (drillObserver) drillObserver.disconnect();
    if (deferredDrill === null) return;
    var i = deferredDrill;
    deferredDrill = null;
    drawDrill(i);
  }
  window.addEventListener('beforeprint', drawDeferredDrill);
  if (window.matchMedia) {
    var printMedia = window.matchMedia('print');
    var onPrint = function (m) { if (m.matches) drawDeferredDrill(); };
    if (printMedia.addEventListener) printMedia.addEventListener('change', onPrint);
    else if (printMedia.addListener) printMedia.addListener(onPrint);
  }
  function drawDrill(i) {
    var box = $('project-detail'), k = String(i);
    box.setAttribute('data-rendered', 'pending');
    var x = D.drill[k], pw = D.pw[k], pl = D.plane;
    var curve = [], cells = [];
    var keepY = {}; pl.curve_y.forEach(function (j) { keepY[j] = true; });
    pl.pos.forEach(function (s, n) {
      var ix = pl.ix[n], iy = pl.iy[n], v = pw[s];
      if (v === null) return;
      cells.push({x: pl.x[ix], x_lo: pl.x_lo[ix], x_hi: pl.x_hi[ix], inflation: pl.y[iy], y_lo: pl.y_lo[iy], y_hi: pl.y_hi[iy], pw: v});
      if (keepY[iy]) curve.push({x: pl.x[ix], inflation: pl.y[iy], pw: v, negative_real: S.real[s] < 0});
    });
    curve.sort(function (a, b) { return a.inflation - b.inflation || a.x - b.x; });
    var lines = [];     // packed as [level, x0, y0, x1, y1, ...] per line
    x.lines.forEach(function (r, n) {
      for (var q = 1; q + 1 < r.length; q += 2) lines.push({line: n, point: (q - 1) / 2, level: r[0], x: r[q], y: r[q + 1]});
    });
    var labels = x.labels.map(function (r) { return {x: r[0], y: r[1], text: r[2]}; });
    var zr = pl.zero_real.map(function (r) { return {x: r[0], y: r[1]}; });
    var sur = spec('surface', {cells: cells, lines: lines, labels: labels, zero_real: zr}, 'Present worth surface: ' + label(i));
    sur.layer[0].encoding.color.scale.domain = [-x.clip, 0, x.clip];
    sur.layer[0].encoding.color.title = 'Present worth (colour clipped at \u00b1' + short(x.clip) + ')';
    $('detail-clip').textContent = 'Colour scale: symmetric about zero, clipped at the 2nd\u201398th percentile of this project\u2019s worths (\u00b1' + short(x.clip) + '); ' + x.beyond + ' of ' + cells.length + ' scenarios lie beyond and are drawn at the end colour.';
    var jobs = [
      ['detail-curve', spec('curve', {curve: curve, irr: x.irr.map(function (r) { return {inflation: r[0], irr: r[1]}; })}, 'Present worth against the discount rate: ' + label(i))],
      ['detail-surface', sur]];
    var tor = x.tornado.map(function (r) { return [{input: r[0], setting: 'its low value', worth: r[1], base: r[3], swing: Math.abs(r[2] - r[1])}, {input: r[0], setting: 'its high value', worth: r[2], base: r[3], swing: Math.abs(r[2] - r[1])}]; });
    tor = [].concat.apply([], tor);
    var spi = x.spider.map(function (r) { return {input: r[0], change: r[1], pw: r[2]}; });
    $('detail-tornado-none').hidden = tor.length > 0;
    $('detail-spider-none').hidden = spi.length > 0;
    if (tor.length) jobs.push(['detail-tornado', spec('tornado', {tornado: tor}, 'Tornado: ' + label(i))]);
    else $('detail-tornado').textContent = '';
    if (spi.length) jobs.push(['detail-spider', spec('spider', {spider: spi}, 'Spider: ' + label(i))]);
    else $('detail-spider').textContent = '';
    Promise.all(jobs.map(function (j) {
      return window.vegaEmbed($(j[0]), j[1], {actions: false, renderer: 'svg', mode: 'vega-lite'})
        .then(function (r) { views.push(r.view); })
        .catch(function (e) { errors.push('drill-down chart ' + j[0] + ' failed: ' + e); });
    })).then(function () { box.setAttribute('data-rendered', String(jobs.length)); });
  }
  var search = $('project-search'), results = $('search-results');
  function find() {
    while (results.firstChild) results.removeChild(results.firstChild);
    var q = search.value.trim().toLowerCase();
    $('search-none').hidden = true;
    if (!q) return [];
    var hits = [];
    for (var i = 0; i < P.id.length && hits.length < 20; i++) {
      if (P.id[i].toLowerCase().indexOf(q) >= 0 || P.name[i].toLowerCase().indexOf(q) >= 0) hits.push(i);
    }
    hits.forEach(function (i) {
      var li = el('li'); var b = el('button', label(i)); b.type = 'button';
      b.setAttribute('data-project-id', P.id[i]);
      b.addEventListener('click', function () { openProject(i); });
      li.appendChild(b); results.appendChild(li);
    });
    if (!hits.length) { $('search-none').hidden = false; $('search-none-text').textContent = search.value.trim(); }
    return hits;
  }
  search.addEventListener('input', find);
  search.addEventListener('keydown', function (e) {
    if (e.key === 'Enter') { e.preventDefault(); var h = find(); if (h.length) openProject(h[0]); }
  });
  update();
  var first = D.first === null || D.first === undefined ? null : D.first;
  if (first !== null) openProject(first, true);
  window.__ratescapeExplorer = {open: openProject, update: update, ready: true};
  performance.mark('ratescape-explorer-ready');
  $('scenario-ranking').setAttribute('data-ready', '1');
})();
"""


def _fmt_rate(v: float) -> str:
    return f"{v:.2%}"


def explorer_html(data: dict, *, x: str) -> str:
    """The controls, summary line and ranked table of the scenario explorer (filled by the script)."""
    from ratescape.report.chart_style import axis_title
    from ratescape.report.escaping import escape_html

    base = data["base"]
    controls = []
    for n, axis in enumerate(data["axes"]):
        key = axis["key"]
        current = {"discount_rate": data["sc"]["nominal"], "real_rate": data["sc"]["real"],
                   "inflation": data["sc"]["inflation"]}.get(key)
        chosen = current[base] if current is not None else None
        if key == "real_rate" and "nominal_at" in data:
            controls.append(_nominal_control(data, axis, chosen))
            continue
        opts = "".join(
            f'<option value="{escape_html(repr(v))}"{" selected" if chosen is not None and v == chosen else ""}>'
            f'{escape_html(_fmt_rate(v) if key in ("discount_rate", "real_rate", "inflation", "tax_rate") else f"{v:g}")}'
            f"</option>" for v in axis["values"])
        controls.append(f'<label>{escape_html(axis_title(key))} <select name="{escape_html(key)}" '
                        f'data-axis="{escape_html(key)}">{opts}</select></label>')
    if "nominal_at" in data:      # real basis: choose inflation first, its nominal rates follow
        controls[0], controls[1] = controls[1], controls[0]
    rates = ('<span id="scenario-rates">Nominal discount rate <span id="scenario-nominal"></span>; real '
             'discount rate <span id="scenario-real"></span></span>')
    table_rule = ("Every project of the run is listed." if data["full"] else
                  f"This run is large: each scenario lists its {data['table_top']:,} projects of highest present "
                  f"worth (of {data['total_projects']:,}); ranks are exact. The database holds every result.")
    return (
        f'<form class="controls" onsubmit="return false">{"".join(controls)}</form>'
        f'<p id="scenario-summary">{rates}'
        ' <span id="negative-real" class="warn" hidden>below zero: inflation exceeds the nominal rate</span>. '
        'Projects accepted: <strong id="accepted-count"></strong> of '
        f'{data["total_projects"]:,}. Worth of the budget-limited portfolio: <strong id="portfolio-worth"></strong>.</p>'
        f'<p class="guide">{escape_html(table_rule)} Read: projects in order of present worth in the chosen '
        'scenario, highest first; "selected" means in the best portfolio the budget allows in that scenario. '
        'Click a name for its drill-down.</p>'
        '<div class="scroll"><table id="scenario-ranking"><thead><tr><th>Rank</th><th>Project</th>'
        '<th>Present worth</th><th>Accepted</th><th>Selected in the budget-limited portfolio</th></tr></thead>'
        '<tbody></tbody></table></div>'
    )


def _nominal_control(data: dict, axis: dict, chosen_real: float | None) -> str:
    """A real-basis run's ``discount_rate`` control: the nominal rates stored at the base inflation level.

    Each option's value is the stored nominal rate (``repr`` of ``scenarios.discount_rate``), its label
    the nominal and the real rate, and ``data-real-index`` the real-rate level; the page script rebuilds
    the options from ``nominal_at`` when inflation changes, keeping the real rate.
    """
    from ratescape.report.escaping import escape_html

    base = data["base"]
    infl_values = data["axes"][1]["values"]
    row = data["nominal_at"][infl_values.index(data["sc"]["inflation"][base])]
    opts = []
    for j, real in enumerate(axis["values"]):
        if row[j] is None:
            continue
        sel = " selected" if chosen_real is not None and real == chosen_real else ""
        opts.append(f'<option value="{escape_html(row[j])}" data-real-index="{j}"{sel}>'
                    f'{escape_html(_fmt_rate(float(row[j])))} (real {escape_html(_fmt_rate(real))})</option>')
    return ('<label>Discount rate, nominal (real in brackets) <select name="discount_rate" data-axis="real_rate" '
            f'data-nominal-of-real="1">{"".join(opts)}</select></label>')


def search_html(data: dict) -> str:
    """The search box and the drill-down frame (filled by the script)."""
    from ratescape.report.drill_charts import DRILL_GUIDES
    from ratescape.report.escaping import escape_html

    n_drill = len(data["pw"])
    rule = ("Every project has its drill-down." if data["full"] else
            f"This report embeds the drill-down of {n_drill:,} of {data['total_projects']:,} projects: those "
            "named with --project, the leading projects of each headline, then projects whose acceptance "
            "depends on the scenario, by best median rank.")
    missing = ("Not embedded in this report: draw it with "
               "<code>ratescape report --db DB --project <span id=\"detail-missing-id\"></span> --out FILE</code> "
               "or <code>ratescape chart --db DB worth-curve --project ID --out FILE</code>.")
    guides = {k: f'<p class="guide">{escape_html(v)}</p>' for k, v in DRILL_GUIDES.items()}
    return (
        '<label for="project-search">Find a project by id or a word of its name: </label>'
        '<input id="project-search" type="search" autocomplete="off" size="40">'
        f'<p class="guide">{escape_html(rule)}</p>'
        '<p id="search-none" hidden>No embedded project matches "<span id="search-none-text"></span>". '
        + ("" if data["full"] else "It may still be in the run: ") + missing.replace('<span id="detail-missing-id"></span>', "ID")
        + '</p><ul id="search-results"></ul>'
        '<div id="project-detail" data-rendered="0"><h3 id="detail-title"></h3><ul id="detail-facts"></ul>'
        f'<p id="detail-missing" hidden>{missing}</p>'
        '<div id="detail-charts">'
        f'<div class="chart" id="detail-curve"></div>{guides["curve"]}'
        f'<div class="chart" id="detail-surface"></div><p class="guide" id="detail-clip"></p>{guides["surface"]}'
        f'<div class="chart" id="detail-tornado"></div><p id="detail-tornado-none" hidden>No tornado: this run '
        f'has no one-at-a-time sensitivity for this project.</p>{guides["tornado"]}'
        f'<div class="chart" id="detail-spider"></div><p id="detail-spider-none" hidden>No spider: this run has '
        f'no one-at-a-time sensitivity for this project.</p>{guides["spider"]}'
        '</div></div>'
    )
