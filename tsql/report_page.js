(function(){
const D = JSON.parse(document.getElementById('report-data').textContent);
const $ = (id) => document.getElementById(id);
const esc = (s) => String(s).replace(/[&<>"']/g, c => ({'&':'&amp;','<':'&lt;','>':'&gt;','"':'&quot;',"'":'&#39;'}[c]));
const fmt = (x, d) => x === null || x === undefined ? '' : (Math.abs(x) >= 1e4 || (x !== 0 && Math.abs(x) < 1e-3) ? x.toExponential(1) : (+x.toFixed(d === undefined ? 3 : d)).toString());
// a time as plotly reads it on a date axis (UTC wall time), or the number itself
function when(t){
  if (!D.temporal || t === null) return D.temporal ? null : fmt(t, 4);
  const s = new Date(t).toISOString();
  return s.endsWith('T00:00:00.000Z') ? s.slice(0, 10) : s.slice(0, 16).replace('T', ' ');
}
const at = (t) => D.temporal ? when(t) : t;
function extent(vals){ let lo = Infinity, hi = -Infinity; for (const v of vals) if (v !== null && isFinite(v)) { if (v < lo) lo = v; if (v > hi) hi = v; } return lo <= hi ? [lo, hi === lo ? lo + 1 : hi] : [0, 1]; }
function spark(vals){
  const [lo, hi] = extent(vals), w = 110, h = 22, n = Math.max(vals.length - 1, 1);
  let d = '', pen = false;
  vals.forEach((v, i) => { if (v === null) { pen = false; return; }
    d += (pen ? 'L' : 'M') + (1 + i / n * (w - 2)).toFixed(1) + ' ' + (h - 2 - (v - lo) / (hi - lo) * (h - 4)).toFixed(1); pen = true; });
  return `<svg width="${w}" height="${h}"><path class="spark" d="${d}"/></svg>`;
}

// plotly: nothing leaves the page (no cloud link, no math typesetting, no map data)
const CONFIG = {displaylogo: false, showLink: false, showSendToCloud: false, plotlyServerURL: '', topojsonURL: '',
  typesetMath: false, responsive: true, modeBarButtonsToRemove: ['select2d', 'lasso2d']};
const BLUE = '#4a6fa5', ORANGE = '#d9822b', GREEN = '#2e8b57', RED = '#c0392b', GREY = '#8a94a3', INK = '#1d2430';
function layout(o){
  return Object.assign({height: 220, margin: {l: 52, r: 12, t: 8, b: 34}, showlegend: false, hovermode: 'closest',
    font: {family: 'system-ui, sans-serif', size: 11, color: '#566070'}, paper_bgcolor: '#fff', plot_bgcolor: '#fff',
    xaxis: {showgrid: true, gridcolor: '#eef1f5', zeroline: false}, yaxis: {gridcolor: '#eef1f5', zeroline: false}}, o);
}
function plot(div, traces, lay){
  return Plotly.newPlot(div, traces, layout(lay), CONFIG).then(() => { div.dataset.drawn = '1'; });
}
const timeAxis = () => ({type: D.temporal ? 'date' : 'linear', gridcolor: '#eef1f5', zeroline: false});
// charts below the fold are drawn when they come near the view (a page may hold dozens)
const pending = new Map();
const watcher = 'IntersectionObserver' in window ? new IntersectionObserver(entries => {
  for (const e of entries) if (e.isIntersecting && pending.has(e.target)) {
    const draw = pending.get(e.target); pending.delete(e.target); watcher.unobserve(e.target); draw();
  }
}, {rootMargin: '400px'}) : null;
function later(div, draw){ if (watcher) { pending.set(div, draw); watcher.observe(div); } else draw(); }

// overview
const O = D.overview;
$('n-series').textContent = O.series.toLocaleString('en');
$('n-seasonal').textContent = O.seasonal.toLocaleString('en');
$('n-trending').textContent = O.trending.toLocaleString('en');
$('n-changes').textContent = O.with_changes.toLocaleString('en');
const C = {name: 0, rows: 1, period: 2, pnum: 3, strength: 4, qs: 5, tau: 6, qt: 7, changes: 8, acf1: 9, entropy: 10, spark: 11, cps: 12};
const seasonal = r => r[C.qs] !== null && r[C.qs] <= D.level;
// at most SCATTER points (every k-th series by name beyond that): more is a cloud that takes seconds to draw
const SCATTER = 5000, all = D.table.filter(r => r[C.pnum] !== null && r[C.pnum] > 0 && r[C.strength] !== null);
const every = Math.ceil(all.length / SCATTER), pts = every > 1 ? all.filter((_, i) => i % every === 0) : all;
if (every > 1) $('scatter-note').textContent = ` Drawn: every ${every}th series by name, ${pts.length.toLocaleString('en')} of ${all.length.toLocaleString('en')}; the table below holds them all.`;
let overview = Promise.resolve();
if (pts.length) {
  const xr = extent(pts.map(r => r[C.pnum]));
  const dots = (rows, name, colour) => ({type: 'scatter', mode: 'markers', name,
    x: rows.map(r => r[C.pnum]), y: rows.map(r => r[C.strength]), text: rows.map(r => esc(r[C.name])),
    customdata: rows.map(r => [r[C.period], fmt(r[C.qs])]),
    hovertemplate: '<b>%{text}</b><br>period %{customdata[0]}<br>strength %{y:.2f}, q %{customdata[1]}<extra></extra>',
    marker: {size: 5, color: colour, opacity: 0.6}});
  // periods of dates read as spans: a day, a week, a month ... (a log axis' own ticks would be 6 7 8 9 100 2 3)
  const periodTicks = ([lo, hi]) => { if (!D.temporal) return {};
    const t = [[1, '1 day'], [7, '1 week'], [30.44, '1 month'], [60.88, '2 months'], [91.31, '3 months'], [182.6, '6 months'], [365.25, '1 year'], [730.5, '2 years'], [1461, '4 years'], [3652.5, '10 years']]
      .filter(([d]) => d >= lo / 1.5 && d <= hi * 1.5);
    return t.length >= 2 ? {tickvals: t.map(x => x[0]), ticktext: t.map(x => x[1])} : {}; };
  overview = plot($('scatter'), [dots(pts.filter(r => !seasonal(r)), 'not seasonal', GREY), dots(pts.filter(seasonal), `seasonal (q ≤ ${D.level})`, RED)],
    {height: 320, showlegend: true, legend: {orientation: 'h', x: 0, y: 1.12},
     xaxis: Object.assign({type: xr[1] / xr[0] > 4 ? 'log' : 'linear', title: {text: 'period' + (xr[1] / xr[0] > 4 ? ' (log scale)' : '')}, gridcolor: '#eef1f5'}, periodTicks(xr)),
     yaxis: {title: {text: 'strength'}, range: [0, 1.02], gridcolor: '#eef1f5'}, margin: {l: 56, r: 12, t: 36, b: 44}});
}

// table: sort, filter, pages
const detailed = new Set(D.details.map(d => d.series));
const heads = [['series', C.name], ['rows', C.rows], ['period', C.pnum], ['strength', C.strength], ['q cycle', C.qs], ['tau', C.tau],
  ['q trend', C.qt], ['changes', C.changes], ['acf(1)', C.acf1], ['entropy', C.entropy], ['chart', null]];
const PAGE = 50; let view = D.table.slice(), page = 0, sortCol = null, sortDir = 1;
const flagged = r => seasonal(r) || (r[C.qt] !== null && r[C.qt] <= D.level) || r[C.changes] > 0;
function drawTable(){
  const pages = Math.max(1, Math.ceil(view.length / PAGE)); page = Math.min(page, pages - 1);
  const rows = view.slice(page * PAGE, page * PAGE + PAGE);
  $('rows').innerHTML = rows.map(r => `<tr class="${flagged(r) ? 'flag' : ''}" data-series="${esc(r[C.name])}">`
    + `<td>${detailed.has(r[C.name]) ? `<a href="#detail-${D.details.findIndex(d => d.series === r[C.name])}">${esc(r[C.name])}</a>` : esc(r[C.name])}</td>`
    + `<td>${r[C.rows]}</td><td>${esc(r[C.period] || '')}</td><td>${fmt(r[C.strength], 2)}</td><td>${fmt(r[C.qs])}</td><td>${fmt(r[C.tau], 2)}</td>`
    + `<td>${fmt(r[C.qt])}</td><td title="${esc(r[C.cps].map(when).join(', '))}">${r[C.changes] === null ? '' : r[C.changes]}</td><td>${fmt(r[C.acf1], 2)}</td><td>${fmt(r[C.entropy], 2)}</td>`
    + `<td>${spark(r[C.spark])}</td></tr>`).join('');
  $('page-info').textContent = `page ${page + 1} of ${pages} (${view.length.toLocaleString('en')} series)`;
  const t = $('screen-table'); t.dataset.sort = sortCol === null ? '' : heads[sortCol][0] + (sortDir > 0 ? ' asc' : ' desc');
  t.querySelectorAll('th').forEach((th, i) => th.className = i === sortCol ? (sortDir > 0 ? 'sorted-asc' : 'sorted-desc') : '');
}
function refilter(){
  const q = $('filter').value.toLowerCase(), only = $('only-flagged').checked;
  view = D.table.filter(r => (!q || r[C.name].toLowerCase().includes(q)) && (!only || flagged(r)));
  resort(); page = 0; drawTable();
}
function resort(){
  if (sortCol === null) return; const c = heads[sortCol][1];
  view.sort((a, b) => { const x = a[c], y = b[c]; if (x === y) return 0; if (x === null) return 1; if (y === null) return -1; return (x < y ? -1 : 1) * sortDir; });
}
$('heads').innerHTML = heads.map(([n]) => `<th>${n}</th>`).join('');
$('heads').querySelectorAll('th').forEach((th, i) => th.addEventListener('click', () => {
  if (heads[i][1] === null) return; sortDir = sortCol === i ? -sortDir : 1; sortCol = i; resort(); page = 0; drawTable(); }));
$('filter').addEventListener('input', refilter); $('only-flagged').addEventListener('change', refilter);
$('prev').addEventListener('click', () => { page = Math.max(0, page - 1); drawTable(); });
$('next').addEventListener('click', () => { page += 1; drawTable(); });
drawTable();

// flagged series: values, smooth curve, segment levels, change points (layout shapes), cycle profile
$('details').innerHTML = D.details.map((d, i) => {
  const row = D.table.find(r => r[C.name] === d.series), cps = d.segments.slice(1).map(g => g[0]);
  return `<div class="panel" id="detail-${i}" data-series="${esc(d.series)}"><h3>${esc(d.series)}</h3><div class="meta">`
    + `cycle ${esc(row[C.period] || '-')} (strength ${fmt(row[C.strength], 2)}, q ${fmt(row[C.qs])}); trend tau ${fmt(row[C.tau], 2)} (q ${fmt(row[C.qt])}); `
    + `${cps.length} change point${cps.length === 1 ? '' : 's'}${cps.length ? ': ' + cps.map(when).join(', ') : ''}</div>`
    + `<div class="chart" id="detail-chart-${i}"></div>`
    + (d.profile.length ? `<div class="meta">cycle profile: one cycle of ${fmt(d.steps, 3)} steps, from the first observation's phase</div><div class="chart small" id="detail-profile-${i}"></div>` : '')
    + '</div>';
}).join('') || '<p class="meta">No series was flagged.</p>';
D.details.forEach((d, i) => {
  later($(`detail-chart-${i}`), () => {
    const xs = d.points.map(p => p[0]);
    const gaps = xs.slice(1).map((x, k) => x - xs[k]).sort((a, b) => a - b), step = gaps.length ? gaps[gaps.length >> 1] : 1;
    const sx = [], sy = [];
    for (const g of d.segments) { const half = D.model === 'trend' ? (g[3] || 0) * (g[1] - g[0]) / step / 2 : 0;
      sx.push(at(g[0]), at(g[1]), null); sy.push(g[2] - half, g[2] + half, null); }
    const shapes = d.segments.slice(1).map(g => ({type: 'line', name: 'change point', xref: 'x', yref: 'paper', x0: at(g[0]), x1: at(g[0]),
      y0: 0, y1: 1, line: {color: RED, width: 1.4, dash: 'dash'}}));
    plot($(`detail-chart-${i}`), [
      {type: 'scatter', mode: 'lines', name: 'values', x: d.points.map(p => at(p[0])), y: d.points.map(p => p[1]), line: {color: BLUE, width: 1}},
      {type: 'scatter', mode: 'lines', name: 'smooth curve', x: d.smooth.map(p => at(p[0])), y: d.smooth.map(p => p[1]), line: {color: ORANGE, width: 2.2}, opacity: 0.85},
      {type: 'scatter', mode: 'lines', name: 'segment level', x: sx, y: sy, line: {color: GREEN, width: 2}, hoverinfo: 'skip'},
    ], {shapes, xaxis: timeAxis()});
  });
  if (d.profile.length) later($(`detail-profile-${i}`), () => plot($(`detail-profile-${i}`),
    [{type: 'scatter', mode: 'lines+markers', name: 'profile', x: d.profile.map((_, k) => k), y: d.profile, line: {color: ORANGE, width: 2.2}, marker: {size: 4}}],
    {height: 160, xaxis: {title: {text: 'step in the cycle'}, gridcolor: '#eef1f5'}, margin: {l: 52, r: 12, t: 8, b: 40}}));
});

// look-alike groups: members (grey) over the medoid (black), z-scored
$('groups').innerHTML = D.groups.map((g, i) => `<div class="panel"><h3>group ${g.cluster}: ${g.members.length} series, medoid ${esc(g.medoid)}</h3>`
  + `<div class="chart small" id="group-${i}"></div><div class="meta">${g.members.map(m => esc(m.series)).join(', ')}</div></div>`).join('')
  || '<p class="meta">No look-alike groups: too few flagged series, or series too long for all-pairs DTW.</p>';
D.groups.forEach((g, i) => later($(`group-${i}`), () => {
  const line = (m, colour, width) => ({type: 'scatter', mode: 'lines', name: esc(m.series), x: m.z.map((_, k) => k), y: m.z,
    line: {color: colour, width}, opacity: m.series === g.medoid ? 1 : 0.7});
  const med = g.members.find(m => m.series === g.medoid);
  plot($(`group-${i}`), g.members.filter(m => m.series !== g.medoid).map(m => line(m, GREY, 1)).concat(med ? [line(med, INK, 2.2)] : []),
    {height: 180, xaxis: {title: {text: 'grid step (z-scores)'}, gridcolor: '#eef1f5'}, margin: {l: 40, r: 12, t: 8, b: 40}});
}));

// expected load with its band
if (D.load) {
  const hour = D.load.phase === 'hour', names = hour ? (k => k + 'h') : (k => ['', 'Mon', 'Tue', 'Wed', 'Thu', 'Fri', 'Sat', 'Sun'][k] || '');
  const profiles = Object.entries(D.load.profiles);
  $('load').innerHTML = profiles.map(([name], i) => `<div class="panel"><h3>${esc(name)}</h3><div class="chart small" id="load-${i}"></div></div>`).join('');
  profiles.forEach(([name, p], i) => later($(`load-${i}`), () => {
    const xs = p.map(r => names(r[0]));
    plot($(`load-${i}`), [
      {type: 'scatter', mode: 'lines', name: '10th percentile', x: xs, y: p.map(r => r[2]), line: {width: 0, color: BLUE}, hoverinfo: 'skip'},
      {type: 'scatter', mode: 'lines', name: '90th percentile', x: xs, y: p.map(r => r[3]), line: {width: 0, color: BLUE}, fill: 'tonexty', fillcolor: 'rgba(74,111,165,0.2)', hoverinfo: 'skip'},
      {type: 'scatter', mode: 'lines+markers', name: 'expected', x: xs, y: p.map(r => r[1]), line: {color: ORANGE, width: 2.2}, marker: {size: 4},
       customdata: p.map(r => [r[2], r[3], r[4]]), hovertemplate: '%{x}: %{y:.3g} (band %{customdata[0]:.3g} to %{customdata[1]:.3g}, %{customdata[2]} rows)<extra></extra>'},
    ], {height: 180, xaxis: {type: 'category', title: {text: hour ? 'hour of day' : 'day of week'}, gridcolor: '#eef1f5'}, margin: {l: 48, r: 12, t: 8, b: 40}});
  }));
}
overview.then(() => { document.body.dataset.ready = '1'; });
})();
