(function(){
const D = JSON.parse(document.getElementById('report-data').textContent);
const $ = (id) => document.getElementById(id);
const esc = (s) => String(s).replace(/[&<>"']/g, c => ({'&':'&amp;','<':'&lt;','>':'&gt;','"':'&quot;',"'":'&#39;'}[c]));
const fmt = (x, d) => x === null || x === undefined ? '' : (Math.abs(x) >= 1e4 || (x !== 0 && Math.abs(x) < 1e-3) ? x.toExponential(1) : (+x.toFixed(d === undefined ? 3 : d)).toString());
function when(t){
  if (!D.temporal) return fmt(t, 4);
  const s = new Date(t).toISOString();
  return s.endsWith('T00:00:00.000Z') ? s.slice(0, 10) : s.slice(0, 16).replace('T', ' ');
}
function ticks(lo, hi, n){
  if (!(hi > lo)) return [lo];
  const step = Math.pow(10, Math.floor(Math.log10((hi - lo) / n)));
  const m = [1, 2, 5, 10].find(k => (hi - lo) / (step * k) <= n) * step;
  const out = []; for (let v = Math.ceil(lo / m) * m; v <= hi + 1e-9 * m; v += m) out.push(v); return out;
}
// round calendar ticks (UTC): years, months, days or hours, at most about six
const DAY = 864e5;
function timeTicks(lo, hi){
  if (!D.temporal) return ticks(lo, hi, 5);
  const span = hi - lo, out = [], a = new Date(lo);
  if (span > 60 * DAY) {
    const months = [1, 2, 3, 6, 12, 24, 60].find(m => span / (m * 30.4 * DAY) <= 6) || 120;
    let y = a.getUTCFullYear(), m = Math.ceil(a.getUTCMonth() / months) * months;
    for (let t = Date.UTC(y, m, 1); t <= hi; m += months, t = Date.UTC(y, m, 1)) if (t >= lo) out.push(t);
    return out;
  }
  const step = [3600e3, 6 * 3600e3, 12 * 3600e3, DAY, 2 * DAY, 7 * DAY, 14 * DAY].find(k => span / k <= 6) || 28 * DAY;
  for (let t = Math.ceil(lo / step) * step; t <= hi; t += step) out.push(t);
  return out;
}
function timeLabel(t, span){
  const s = new Date(t).toISOString();
  return span > 60 * DAY ? s.slice(0, 7) : span > 2 * DAY ? s.slice(0, 10) : s.slice(0, 16).replace('T', ' ');
}
function logTicks(lo, hi){
  const out = []; for (let e = Math.floor(Math.log10(lo)); e <= Math.ceil(Math.log10(hi)); e++)
    for (const m of [1, 2, 5]) { const v = m * Math.pow(10, e); if (v >= lo && v <= hi) out.push(v); }
  return out;
}
function extent(vals){ let lo = Infinity, hi = -Infinity; for (const v of vals) if (v !== null && isFinite(v)) { if (v < lo) lo = v; if (v > hi) hi = v; } return lo <= hi ? [lo, hi === lo ? lo + 1 : hi] : [0, 1]; }
function path(xs, ys, sx, sy){ let s = '', pen = false;
  for (let i = 0; i < xs.length; i++) { if (ys[i] === null || xs[i] === null) { pen = false; continue; } s += (pen ? 'L' : 'M') + sx(xs[i]).toFixed(1) + ' ' + sy(ys[i]).toFixed(1); pen = true; }
  return s; }
// one chart: {w, h, x: [lo, hi], y: [lo, hi], lines: [{xs, ys, cls}], band, vlines, segs, xlabel, logx, timeaxis}
function chart(o){
  const w = o.w || 520, h = o.h || 200, L = 52, R = 10, T = 10, B = 26;
  const fx = o.logx ? Math.log10 : (v => v);
  const x0 = fx(o.x[0]), x1 = fx(o.x[1]) === x0 ? x0 + 1 : fx(o.x[1]);
  const sx = v => L + (fx(v) - x0) / (x1 - x0) * (w - L - R), sy = v => h - B - (v - o.y[0]) / (o.y[1] - o.y[0]) * (h - T - B);
  let s = `<svg width="${w}" height="${h}" viewBox="0 0 ${w} ${h}" role="img">`;
  s += `<line class="axis" x1="${L}" y1="${h - B}" x2="${w - R}" y2="${h - B}"/><line class="axis" x1="${L}" y1="${T}" x2="${L}" y2="${h - B}"/>`;
  for (const v of ticks(o.y[0], o.y[1], 4)) s += `<text x="${L - 4}" y="${sy(v) + 3}" text-anchor="end">${fmt(v, 2)}</text>`;
  const xt = o.logx ? logTicks(o.x[0], o.x[1]) : o.timeaxis ? timeTicks(o.x[0], o.x[1]) : ticks(o.x[0], o.x[1], 5);
  for (const v of xt) s += `<text x="${sx(v)}" y="${h - B + 14}" text-anchor="middle">${o.timeaxis ? timeLabel(v, o.x[1] - o.x[0]) : (o.xlabels ? o.xlabels(v) : fmt(v, 2))}</text>`;
  if (o.band) { const [xs, lo, hi] = o.band; let p = ''; for (let i = 0; i < xs.length; i++) p += (i ? 'L' : 'M') + sx(xs[i]).toFixed(1) + ' ' + sy(hi[i]).toFixed(1);
    for (let i = xs.length - 1; i >= 0; i--) p += 'L' + sx(xs[i]).toFixed(1) + ' ' + sy(lo[i]).toFixed(1); s += `<path class="band" d="${p}Z"/>`; }
  for (const l of o.lines || []) s += `<path class="${l.cls}" d="${path(l.xs, l.ys, sx, sy)}"${l.name ? ` data-series="${esc(l.name)}"` : ''}><title>${esc(l.title || '')}</title></path>`;
  for (const g of o.segs || []) s += `<line class="seg" x1="${sx(g[0]).toFixed(1)}" y1="${sy(g[1]).toFixed(1)}" x2="${sx(g[2]).toFixed(1)}" y2="${sy(g[3]).toFixed(1)}"/>`;
  for (const t of o.vlines || []) s += `<line class="cp" data-time="${esc(when(t))}" x1="${sx(t).toFixed(1)}" y1="${T}" x2="${sx(t).toFixed(1)}" y2="${h - B}"><title>change at ${esc(when(t))}</title></line>`;
  if (o.dots) s += o.dots(sx, sy);
  if (o.xlabel) s += `<text x="${w - R}" y="${h - 1}" text-anchor="end">${esc(o.xlabel)}</text>`;
  return s + '</svg>';
}
function spark(vals){
  const [lo, hi] = extent(vals), w = 110, h = 22;
  const xs = vals.map((_, i) => i);
  const d = path(xs, vals, i => 1 + i / Math.max(vals.length - 1, 1) * (w - 2), v => h - 2 - (v - lo) / (hi - lo) * (h - 4));
  return `<svg width="${w}" height="${h}"><path class="spark" d="${d}"/></svg>`;
}

// overview
const O = D.overview;
$('n-series').textContent = O.series.toLocaleString('en');
$('n-seasonal').textContent = O.seasonal.toLocaleString('en');
$('n-trending').textContent = O.trending.toLocaleString('en');
$('n-changes').textContent = O.with_changes.toLocaleString('en');
const C = {name: 0, rows: 1, period: 2, pnum: 3, strength: 4, qs: 5, tau: 6, qt: 7, changes: 8, acf1: 9, entropy: 10, spark: 11, cps: 12};
const seasonal = r => r[C.qs] !== null && r[C.qs] <= D.level;
const pts = D.table.filter(r => r[C.pnum] !== null && r[C.pnum] > 0 && r[C.strength] !== null);
if (pts.length) {
  const xr = extent(pts.map(r => r[C.pnum]));
  $('scatter').innerHTML = chart({w: 1100, h: 300, x: xr, y: [0, 1], logx: xr[1] / xr[0] > 4, xlabel: D.temporal ? 'period (days)' : 'period',
    dots: (sx, sy) => pts.map(r => `<circle class="dot${seasonal(r) ? ' hit' : ''}" cx="${sx(r[C.pnum]).toFixed(1)}" cy="${sy(r[C.strength]).toFixed(1)}" r="3"><title>${esc(r[C.name])}: ${esc(r[C.period])}, strength ${fmt(r[C.strength], 2)}, q ${fmt(r[C.qs])}</title></circle>`).join('')});
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

// flagged series
$('details').innerHTML = D.details.map((d, i) => {
  const xs = d.points.map(p => p[0]), ys = d.points.map(p => p[1]);
  const gaps = xs.slice(1).map((x, k) => x - xs[k]).sort((a, b) => a - b), step = gaps.length ? gaps[gaps.length >> 1] : 1;
  const segs = d.segments.map(g => { const half = D.model === 'trend' ? (g[3] || 0) * (g[1] - g[0]) / step / 2 : 0;
    return [g[0], g[2] - half, g[1], g[2] + half]; });
  const yr = extent(ys.concat(d.smooth.map(p => p[1]), segs.flatMap(g => [g[1], g[3]])));
  const cps = d.segments.slice(1).map(g => g[0]);
  const row = D.table.find(r => r[C.name] === d.series);
  let s = `<div class="panel" id="detail-${i}" data-series="${esc(d.series)}"><h3>${esc(d.series)}</h3><div class="meta">`
    + `cycle ${esc(row[C.period] || '-')} (strength ${fmt(row[C.strength], 2)}, q ${fmt(row[C.qs])}); trend tau ${fmt(row[C.tau], 2)} (q ${fmt(row[C.qt])}); `
    + `${cps.length} change point${cps.length === 1 ? '' : 's'}${cps.length ? ': ' + cps.map(when).join(', ') : ''}</div>`;
  s += chart({w: 760, h: 220, x: extent(xs), y: yr, timeaxis: D.temporal, vlines: cps, segs: segs,
    lines: [{xs, ys, cls: 'line', title: 'values'}, {xs: d.smooth.map(p => p[0]), ys: d.smooth.map(p => p[1]), cls: 'smooth', title: 'smooth curve'}]});
  if (d.profile.length) s += `<div class="meta">cycle profile: one cycle of ${fmt(d.steps, 3)} steps, from the first observation's phase</div>`
    + chart({w: 360, h: 150, x: [0, d.profile.length - 1], y: extent(d.profile), lines: [{xs: d.profile.map((_, k) => k), ys: d.profile, cls: 'smooth', title: 'profile'}], xlabel: 'step in the cycle'});
  return s + '</div>';
}).join('') || '<p class="meta">No series was flagged.</p>';

// look-alike groups
$('groups').innerHTML = D.groups.map(g => {
  const all = g.members.flatMap(m => m.z), n = Math.max(...g.members.map(m => m.z.length));
  const lines = g.members.filter(m => m.series !== g.medoid).map(m => ({xs: m.z.map((_, k) => k), ys: m.z, cls: 'member', name: m.series, title: m.series}));
  const med = g.members.find(m => m.series === g.medoid);
  if (med) lines.push({xs: med.z.map((_, k) => k), ys: med.z, cls: 'medoid', name: med.series, title: 'medoid ' + med.series});
  return `<div class="panel"><h3>group ${g.cluster}: ${g.members.length} series, medoid ${esc(g.medoid)}</h3>`
    + chart({w: 360, h: 170, x: [0, n - 1], y: extent(all), lines, xlabel: 'grid step (z-scores)'})
    + `<div class="meta">${g.members.map(m => esc(m.series)).join(', ')}</div></div>`;
}).join('') || '<p class="meta">No look-alike groups: too few flagged series, or series too long for all-pairs DTW.</p>';

// expected load
if (D.load) {
  const names = D.load.phase === 'hour' ? (k => k + 'h') : (k => ['', 'Mon', 'Tue', 'Wed', 'Thu', 'Fri', 'Sat', 'Sun'][k] || '');
  $('load').innerHTML = Object.entries(D.load.profiles).map(([name, p]) => {
    const xs = p.map(r => r[0]), e = p.map(r => r[1]), lo = p.map(r => r[2]), hi = p.map(r => r[3]);
    return `<div class="panel"><h3>${esc(name)}</h3>` + chart({w: 360, h: 170, x: extent(xs), y: extent(lo.concat(hi, e)), band: [xs, lo, hi],
      lines: [{xs, ys: e, cls: 'smooth', title: 'expected'}], xlabels: names, xlabel: D.load.phase === 'hour' ? 'hour of day' : 'day of week'}) + '</div>';
  }).join('');
}
document.body.dataset.ready = '1';
})();
