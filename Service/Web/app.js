// Bitbudget's page: reads the /v1 API with the tab's API key and draws a search with Apache ECharts.
// Views by hash: #/ (searches), #/search/{id}, #/compare/{id}/{other}.
'use strict';

const KEY = 'bitbudget.apiKey';
const view = document.getElementById('view');
const POLL_RUNNING_MS = 1500;
const POLL_IDLE_MS = 10000;

// Viridis (perceptually uniform, readable with red-green colour blindness) for sensitivity; blue-orange for change;
// Okabe-Ito colours for series.
const VIRIDIS = ['#440154', '#482878', '#3e4989', '#31688e', '#26828e', '#1f9e89', '#35b779', '#6ece58', '#b5de2b', '#fde725'];
const DIVERGING = ['#b35806', '#f1a340', '#fee0b6', '#f7f7f7', '#d8daeb', '#998ec3', '#542788'];
const SERIES = { frontier: '#0072b2', chosen: '#d55e00', measured: '#000000', uniform4: '#e69f00', uniform8: '#56b4e9', validation: '#cc79a7', params: '#999999' };

let timer = null;

// replaceChildren writes null as the text "null": optional parts are left out instead.
function show(...parts) { view.replaceChildren(...parts.flat().filter((p) => p !== null && p !== undefined && p !== '')); }
let charts = [];

class Unauthorized extends Error {}

// ---- API access --------------------------------------------------------------------------------------------

function key() { return sessionStorage.getItem(KEY); }

async function api(path, { raw = false } = {}) {
  const response = await fetch(path, { headers: { Authorization: 'Bearer ' + key() } });
  if (response.status === 401) {
    sessionStorage.removeItem(KEY);
    askKey('The service refused the key; enter a current one.');
    throw new Unauthorized();
  }
  if (!response.ok) {
    let detail = response.statusText;
    try { detail = (await response.json()).detail || detail; } catch { /* not a problem document */ }
    throw new Error(`${response.status}: ${detail}`);
  }
  return raw ? response : response.json();
}

function askKey(message) {
  const dialog = document.getElementById('key-dialog');
  document.getElementById('key-error').textContent = message || '';
  document.getElementById('forget-key').hidden = true;
  if (!dialog.open) dialog.showModal();
  document.getElementById('key-input').focus();
}

document.getElementById('key-form').addEventListener('submit', async (event) => {
  event.preventDefault();
  const input = document.getElementById('key-input');
  const candidate = input.value.trim();
  if (!candidate) return;
  const response = await fetch('/v1/searches?limit=1', { headers: { Authorization: 'Bearer ' + candidate } });
  if (response.status === 401) {
    document.getElementById('key-error').textContent = 'The service does not accept this key.';
    return;
  }
  sessionStorage.setItem(KEY, candidate);
  input.value = '';
  document.getElementById('key-dialog').close();
  route();
});

document.getElementById('forget-key').addEventListener('click', () => {
  sessionStorage.removeItem(KEY);
  stop();
  view.replaceChildren();
  askKey();
});

// ---- small helpers ----------------------------------------------------------------------------------------

function el(tag, attributes = {}, ...children) {
  const node = document.createElement(tag);
  for (const [name, value] of Object.entries(attributes)) {
    if (value === null || value === undefined || value === false) continue;
    if (name === 'class') node.className = value;
    else if (name.startsWith('on')) node.addEventListener(name.slice(2), value);
    else node.setAttribute(name, value === true ? '' : value);
  }
  for (const child of children.flat()) {
    if (child === null || child === undefined) continue;
    node.append(child instanceof Node ? child : document.createTextNode(String(child)));
  }
  return node;
}

// JSON carries non-finite numbers as the strings "Infinity", "-Infinity" and "NaN".
function num(value) { return typeof value === 'string' ? Number(value) : value; }

function fmtBytes(bytes) {
  if (bytes === null || bytes === undefined) return '—';
  if (bytes < 1024) return `${bytes} B`;
  if (bytes < 1024 * 1024) return `${(bytes / 1024).toFixed(1)} KiB`;
  return `${(bytes / 1024 / 1024).toFixed(2)} MiB`;
}

function fmt(value, digits = 2) {
  value = num(value);
  if (value === null || value === undefined) return '—';
  if (value === Infinity) return '∞';
  if (value === -Infinity) return '−∞';
  if (Number.isNaN(value)) return 'NaN';
  if (value !== 0 && Math.abs(value) < 1e-3) return value.toExponential(2);
  return value.toFixed(digits);
}

function fmtSigned(value, digits = 2) {
  value = num(value);
  if (value === null || value === undefined) return '—';
  return (value > 0 ? '+' : '') + fmt(value, digits);
}

const METRICS = {
  'sqnr': { label: 'SQNR', unit: ' dB', higher: true, fromAdditive: (x) => -10 * Math.log10(x) },
  'relative-mse': { label: 'relative MSE', unit: '', higher: false, fromAdditive: (x) => x },
  'top1': { label: 'top-1 agreement', unit: '', higher: true, fromAdditive: (x) => 1 - x },
  'kl': { label: 'KL divergence', unit: ' nats', higher: false, fromAdditive: (x) => x },
  'cosine': { label: 'cosine similarity', unit: '', higher: true, fromAdditive: (x) => 1 - x },
  'accuracy-drop': { label: 'accuracy drop', unit: ' points', higher: false, fromAdditive: (x) => x },
};

function metricOf(name) { return METRICS[name] || { label: name || 'error', unit: '', higher: false, fromAdditive: (x) => x }; }

function budgetText(budget) {
  if (!budget) return '—';
  if (budget.bytes != null) return `size ≤ ${fmtBytes(budget.bytes)}`;
  if (budget.averageBits != null) return `≤ ${budget.averageBits} bits on average`;
  const metric = metricOf(budget.metric);
  if (budget.atLeast != null) return `${metric.label} ≥ ${budget.atLeast}${metric.unit}`;
  if (budget.atMost != null) return `${metric.label} ≤ ${budget.atMost}${metric.unit}`;
  return metric.label;
}

function measuredText(search) {
  const summary = search.summary;
  if (!summary || summary.measured === null || summary.measured === undefined) return '—';
  const metric = metricOf(search.settings && search.settings.budget && search.settings.budget.metric || 'sqnr');
  return fmt(summary.measured) + metric.unit;
}

function progressCell(search) {
  if (search.state !== 'running' && search.state !== 'queued') return '';
  const { done, total } = search.progress;
  const share = total > 0 ? Math.min(100, Math.round(100 * done / total)) : 0;
  const eta = search.etaSeconds != null ? `, about ${Math.ceil(search.etaSeconds)} s left` : '';
  return el('div', { class: 'progress', 'data-progress': `${done}/${total}` },
    search.state === 'queued' ? 'waiting for a worker' : `${search.stage || 'starting'}: ${done} of ${total}${eta}`,
    el('div', { class: 'bar' }, el('span', { style: `width:${share}%` })));
}

function stateBadge(state) { return el('span', { class: `state ${state}` }, state); }

function modelLabel(models, id) {
  const model = models.get(id);
  return model ? `${model.name} v${model.version}` : id;
}

function card(label, value, title) {
  return el('div', { class: 'card', title: title || null }, el('div', { class: 'label' }, label), el('div', { class: 'value' }, value));
}

// Every trial the result rests on (the manifest's count); a search that reused an earlier search's sweep says how
// much of it it measured itself, which is what it cost.
function trialsCard(trials, rounds) {
  const box = card('Trials / validation rounds', `${trials.total} / ${rounds}`);
  box.id = 'trials-card';
  if (trials.reused > 0) {
    box.append(el('div', { class: 'detail' }, `${trials.measured} measured here, ${trials.reused} reused from earlier searches with the same model, data and settings`));
  }
  return box;
}

function stop() {
  if (timer) clearTimeout(timer);
  timer = null;
  for (const chart of charts) chart.dispose();
  charts = [];
}

function chartBox(id, height) { return el('div', { id, class: 'chart', style: `height:${height}px` }); }

function chart(id, option) {
  const instance = echarts.init(document.getElementById(id), null, { renderer: 'canvas' });
  instance.setOption(option);
  charts.push(instance);
  return instance;
}

window.addEventListener('resize', () => charts.forEach((c) => c.resize()));

// Downloads need the Bearer header, which a plain link cannot send: fetch, then hand the bytes to the browser.
async function download(path, fileName) {
  const response = await api(path, { raw: true });
  const url = URL.createObjectURL(await response.blob());
  const link = el('a', { href: url, download: fileName });
  document.body.append(link);
  link.click();
  link.remove();
  setTimeout(() => URL.revokeObjectURL(url), 10000);
}

async function loadModels() {
  const models = await api('/v1/models');
  return new Map(models.map((m) => [m.id, m]));
}

// ---- searches ---------------------------------------------------------------------------------------------

async function showList() {
  const [searches, models] = await Promise.all([api('/v1/searches?limit=100'), loadModels()]);
  const picked = new Set(JSON.parse(sessionStorage.getItem('bitbudget.picked') || '[]'));
  const compareButton = el('button', { type: 'button', id: 'compare-picked', disabled: true }, 'Compare the two ticked');
  const sync = () => {
    const ids = [...picked].filter((id) => searches.some((s) => s.id === id));
    compareButton.disabled = ids.length !== 2;
    sessionStorage.setItem('bitbudget.picked', JSON.stringify(ids));
  };
  compareButton.addEventListener('click', () => {
    const ids = [...picked];
    const ordered = searches.filter((s) => ids.includes(s.id)).reverse().map((s) => s.id);
    location.hash = `#/compare/${ordered[0]}/${ordered[1]}`;
  });

  const rows = searches.map((search) => {
    const tick = el('input', { type: 'checkbox', title: 'Tick two searches to compare them', checked: picked.has(search.id), disabled: search.state !== 'succeeded' });
    tick.addEventListener('click', (event) => event.stopPropagation());
    tick.addEventListener('change', () => { if (tick.checked) picked.add(search.id); else picked.delete(search.id); sync(); });
    const summary = search.summary;
    return el('tr', { class: 'clickable', 'data-search-id': search.id, 'data-state': search.state, onclick: () => { location.hash = `#/search/${search.id}`; } },
      el('td', {}, tick),
      el('td', {}, new Date(search.createdAt).toLocaleString()),
      el('td', {}, stateBadge(search.state), progressCell(search)),
      el('td', {}, modelLabel(models, search.modelId)),
      el('td', {}, budgetText(search.settings.budget)),
      el('td', { class: 'num' }, summary ? fmtBytes(summary.modelFileBytes ?? summary.bytes) : '—'),
      el('td', { class: 'num' }, measuredText(search)));
  });
  sync();

  show(
    el('h1', {}, 'Searches'),
    el('div', { class: 'toolbar' }, compareButton, el('span', { class: 'note' }, 'Newest first. Running searches update on their own.')),
    searches.length === 0
      ? el('p', { class: 'note', id: 'no-searches' }, 'No search yet. Upload a model and a calibration set and POST /v1/searches (see the README).')
      : el('table', { id: 'searches' },
        el('thead', {}, el('tr', {}, el('th', {}, ''), el('th', {}, 'Started'), el('th', {}, 'State'), el('th', {}, 'Model'), el('th', {}, 'Budget'),
          el('th', { class: 'num' }, 'Size'), el('th', { class: 'num' }, 'Measured'))),
        el('tbody', {}, rows)));

  const busy = searches.some((s) => s.state === 'queued' || s.state === 'running');
  timer = setTimeout(() => refresh(showList), busy ? POLL_RUNNING_MS : POLL_IDLE_MS);
}

// ---- one search -------------------------------------------------------------------------------------------

async function showSearch(id) {
  const search = await api(`/v1/searches/${encodeURIComponent(id)}`);
  const models = await loadModels();
  const model = models.get(search.modelId);
  const title = el('h1', {}, `Search of ${modelLabel(models, search.modelId)}`);
  const head = el('p', { class: 'note' }, stateBadge(search.state), ' ', search.id, ' · budget ', budgetText(search.settings.budget));

  if (search.state !== 'succeeded') {
    const parts = [title, head, progressCell(search)];
    if (search.error) parts.push(el('p', { class: 'error' }, `${search.error.code}: ${search.error.message}`));
    show(parts);
    if (search.state === 'queued' || search.state === 'running') timer = setTimeout(() => refresh(() => showSearch(id)), POLL_RUNNING_MS);
    return;
  }

  const [manifest, frontier, trials, siblings] = await Promise.all([
    api(`/v1/searches/${id}/manifest`),
    api(`/v1/searches/${id}/frontier`),
    api(`/v1/searches/${id}/trials?limit=1000`),
    model ? api(`/v1/searches?name=${encodeURIComponent(model.name)}&limit=50`) : Promise.resolve([]),
  ]);
  const summary = search.summary;
  const metric = metricOf(manifest.budget.metric);
  const validations = trials.items.filter((t) => t.kind === 'validation');
  const baseName = model ? model.name.replace(/\.onnx$/i, '') : 'model';

  const downloads = el('div', { class: 'downloads' },
    el('button', { type: 'button', class: 'link', onclick: () => download(`/v1/searches/${id}/manifest`, `${baseName}.manifest.json`) }, 'Manifest (JSON)'),
    summary.modelFileBytes != null
      ? el('button', { type: 'button', class: 'link', onclick: () => download(`/v1/searches/${id}/model`, `${baseName}.quantized.onnx`) }, 'Quantized model (ONNX)')
      : null,
    el('button', { type: 'button', class: 'link', onclick: () => download(`/v1/searches/${id}/sensitivity`, `${baseName}.sensitivity.csv`) }, 'Sensitivity table (CSV)'),
    el('button', { type: 'button', class: 'link', onclick: () => download(`/v1/searches/${id}/frontier`, `${baseName}.frontier.json`) }, 'Frontier (JSON)'));

  const held = summary.heldOut;
  const cards = el('div', { class: 'cards', id: 'summary' },
    card('Outcome', summary.feasible ? 'budget met' : 'budget cannot be met', summary.message),
    card('Quantized model file', fmtBytes(summary.modelFileBytes)),
    card('Smaller than FP32 by', summary.compression != null ? `${fmt(summary.compression)}×` : '—'),
    card('Average bits per weight', fmt(summary.averageBits)),
    card(`Predicted ${metric.label}`, fmt(summary.predicted) + metric.unit, 'what the additive error model predicts'),
    card(`Measured ${metric.label}`, fmt(summary.measured) + metric.unit, 'the chosen assignment run end to end in ONNX Runtime'),
    held ? card(`Held-out ${metric.label}`, fmt(held.measured) + metric.unit, `${held.samples} held-out samples`) : null,
    trialsCard(trials, manifest.outcome.validationRounds));

  const others = siblings.filter((s) => s.id !== id && s.state === 'succeeded');
  const compareList = others.length === 0 ? null : el('div', { id: 'compare-with' },
    el('h2', {}, 'Compare with another search of this model name'),
    el('ul', {}, others.map((s) => el('li', {},
      el('a', { href: `#/compare/${s.id}/${id}` }, `${modelLabel(models, s.modelId)}, ${new Date(s.createdAt).toLocaleString()}`),
      ` · ${budgetText(s.settings.budget)} · ${fmtBytes(s.summary && s.summary.modelFileBytes)}`))));

  const layers = manifest.layers;
  const skipped = manifest.skipped || [];
  show(
    title, head,
    el('p', {}, summary.message),
    cards,
    summary.warnings.length ? el('ul', { class: 'warnings' }, summary.warnings.map((w) => el('li', {}, w))) : null,
    summary.storageNote ? el('p', { class: 'note' }, summary.storageNote) : null,
    el('h2', {}, 'Downloads'), downloads,
    el('h2', {}, 'Sensitivity of each layer at each candidate width'),
    el('p', { class: 'note' }, 'Each cell is one trial: the layer alone at that width, every other layer FP32. Colour: output SQNR (dB), brighter = less error. The outlined cell is the chosen width.'),
    chartBox('heatmap', Math.max(220, 60 + 34 * layers.length)),
    el('h2', {}, 'Size against error: the frontier'),
    el('p', { class: 'note' }, `Pareto frontier under the additive model (${manifest.budget.additiveModel}); the chosen point as predicted and as measured, uniform 4-bit and 8-bit where measured, and the end-to-end measurement of each validation round.`),
    chartBox('frontier', 380),
    el('h2', {}, 'Chosen bits per layer against its parameter count'),
    chartBox('bits', Math.max(240, 60 + 30 * layers.length)),
    el('h2', {}, 'Layers'),
    layerTable(layers),
    skipped.length ? el('h2', {}, 'Weights left in FP32 (skipped)') : null,
    skipped.length ? el('table', { id: 'skipped' },
      el('thead', {}, el('tr', {}, el('th', {}, 'Node'), el('th', {}, 'Op'), el('th', {}, 'Input'), el('th', { class: 'num' }, 'Parameters'), el('th', {}, 'Why'))),
      el('tbody', {}, skipped.map((s) => el('tr', {}, el('td', {}, s.node), el('td', {}, s.op), el('td', {}, s.input), el('td', { class: 'num' }, s.parameters.toLocaleString()), el('td', {}, s.reason))))) : null,
    compareList);

  drawHeatmap(layers);
  drawFrontier(manifest, frontier, validations, metric);
  drawBits(layers);
}

function layerState(layer) {
  if (layer.excluded) return 'kept FP32 (excluded)';
  if (layer.coverage && layer.coverage.status !== 'exercised') return layer.coverage.status;
  return '';
}

function layerTable(layers) {
  return el('table', { id: 'layers' },
    el('thead', {}, el('tr', {}, el('th', {}, 'Layer'), el('th', {}, 'Op'), el('th', {}, 'Weight shape'), el('th', { class: 'num' }, 'Parameters'),
      el('th', { class: 'num' }, 'Bits'), el('th', { class: 'num' }, 'Bytes'), el('th', {}, 'Scheme'), el('th', {}, 'Note'))),
    el('tbody', {}, layers.map((l) => el('tr', { 'data-layer': l.name },
      el('td', {}, l.name), el('td', {}, l.op), el('td', {}, l.shape.join('×')), el('td', { class: 'num' }, l.parameters.toLocaleString()),
      el('td', { class: 'num' }, l.bits ?? 'FP32'), el('td', { class: 'num' }, l.bytes.toLocaleString()),
      el('td', {}, `${l.scheme}, ${l.granularity}, ${l.clip}`),
      el('td', {}, [layerState(l), l.pinned ? 'pinned' : ''].filter(Boolean).join('; '), l.coverage && l.coverage.reason ? el('div', { class: 'note' }, l.coverage.reason) : null)))));
}

function widthLabel(bits) { return bits === 32 ? 'FP32' : bits === 16 ? 'FP16' : `${bits}-bit`; }

function drawHeatmap(layers) {
  const widths = [...new Set(layers.flatMap((l) => l.sensitivity.map((s) => s.bits)))].sort((a, b) => a - b);
  const names = layers.map((l) => l.name + (layerState(l) ? ` (${layerState(l)})` : ''));
  const finite = layers.flatMap((l) => l.sensitivity.map((s) => num(s.metrics.sqnrDb))).filter(Number.isFinite);
  const low = finite.length ? Math.floor(Math.min(...finite)) : 0;
  const high = finite.length ? Math.ceil(Math.max(...finite)) : 1;
  const cells = [];
  const chosen = [];
  layers.forEach((layer, row) => {
    for (const s of layer.sensitivity) {
      const sqnr = num(s.metrics.sqnrDb);
      // An infinite SQNR (a width that changes nothing, e.g. FP32) is drawn at the top of the scale.
      cells.push({ value: [widths.indexOf(s.bits), row, Number.isFinite(sqnr) ? sqnr : high], layer: layer.name, trial: s });
    }
    if (layer.bits != null) chosen.push({ value: [widths.indexOf(layer.bits), row], layer: layer.name, bits: layer.bits });
  });
  chart('heatmap', {
    animation: false,
    grid: { left: 10, right: 90, top: 10, bottom: 40, containLabel: true },
    xAxis: { type: 'category', data: widths.map(widthLabel), name: 'candidate width', nameLocation: 'middle', nameGap: 28, splitArea: { show: true } },
    yAxis: { type: 'category', data: names, inverse: true, splitArea: { show: true } },
    visualMap: { min: low, max: high, calculable: true, orient: 'vertical', right: 0, top: 'middle', text: ['dB (less error)', 'dB (more error)'], inRange: { color: VIRIDIS }, seriesIndex: 0 },
    tooltip: {
      formatter: (p) => {
        if (p.seriesName === 'chosen') return `${p.data.layer}: chosen ${widthLabel(p.data.bits)}`;
        const t = p.data.trial;
        return `<b>${p.data.layer}</b> at ${widthLabel(t.bits)}<br>SQNR ${fmt(t.metrics.sqnrDb)} dB<br>relative MSE ${fmt(t.metrics.relativeMse, 4)}`
          + `<br>top-1 agreement ${fmt(t.metrics.top1Agreement, 4)}<br>additive error ${fmt(t.additiveError, 4)}<br>layer bytes ${t.bytes.toLocaleString()}`;
      },
    },
    series: [
      { name: 'sensitivity', type: 'heatmap', data: cells, label: { show: true, formatter: (p) => fmt(p.data.trial.metrics.sqnrDb, 1), color: '#fff', textBorderColor: '#000', textBorderWidth: 2 } },
      { name: 'chosen', type: 'scatter', data: chosen, symbol: 'rect', symbolSize: [46, 22], z: 3,
        itemStyle: { color: 'rgba(0,0,0,0)', borderColor: SERIES.chosen, borderWidth: 3 } },
    ],
  });
}

// The uniform assignment at `bits`, from the per-layer trials: bytes = the chosen file's bytes with every layer's
// bytes swapped for its bytes at that width; error = the additive model's sum. Null when a layer has no such trial.
function uniformPoint(manifest, bits, metric) {
  let bytes = manifest.totals.bytes;
  let additive = 0;
  for (const layer of manifest.layers) {
    if (layer.bits == null) continue;
    const trial = layer.sensitivity.find((s) => s.bits === bits);
    if (!trial) return null;
    bytes += trial.bytes - layer.bytes;
    additive += num(trial.additiveError);
  }
  const value = metric.fromAdditive(additive);
  return Number.isFinite(value) ? [bytes, value] : null;
}

function drawFrontier(manifest, frontier, validations, metric) {
  const points = frontier.points.map((p) => [p.bytes, num(p.predicted), p.averageBits]).filter((p) => Number.isFinite(p[1]));
  const series = [
    { name: 'frontier (predicted)', type: 'line', step: false, data: points, showSymbol: true, symbolSize: 5, color: SERIES.frontier, z: 1 },
  ];
  const totals = manifest.totals;
  if (totals) {
    const predicted = num(totals.predicted);
    if (Number.isFinite(predicted)) series.push({ name: 'chosen (predicted)', type: 'scatter', data: [[totals.bytes, predicted]], symbol: 'diamond', symbolSize: 16, color: SERIES.chosen, z: 4 });
    const measured = num(totals.measured);
    if (Number.isFinite(measured)) series.push({ name: 'chosen (measured)', type: 'scatter', data: [[totals.modelFileBytes ?? totals.bytes, measured]], symbol: 'triangle', symbolSize: 14, color: SERIES.measured, z: 5 });
    for (const [bits, color] of [[4, SERIES.uniform4], [8, SERIES.uniform8]]) {
      const point = uniformPoint(manifest, bits, metric);
      if (point) series.push({ name: `uniform ${bits}-bit`, type: 'scatter', data: [point], symbol: 'rect', symbolSize: 12, color, z: 3 });
    }
  }
  // A validation trial stores the assignment's hash, not its size: each round is a line at the value it measured.
  const rounds = validations.map((t, i) => ({ name: `validation ${i + 1}`, yAxis: validationValue(t.metrics, metric), label: { formatter: `validation ${i + 1}: ${fmt(validationValue(t.metrics, metric))}${metric.unit}`, position: 'insideStartTop' } }))
    .filter((r) => Number.isFinite(r.yAxis));
  const budget = manifest.budget;
  const bound = budget.atLeast ?? budget.atMost;
  const lines = [...rounds];
  if (bound != null) lines.push({ name: 'budget', yAxis: bound, lineStyle: { color: SERIES.chosen, type: 'solid' }, label: { formatter: `budget ${bound}${metric.unit}`, position: 'insideEndTop' } });
  if (budget.bytes != null) lines.push({ name: 'size budget', xAxis: budget.bytes, label: { formatter: `budget ${fmtBytes(budget.bytes)}` } });
  series.push({ name: 'validation rounds', type: 'line', data: [], color: SERIES.validation,
    markLine: { symbol: 'none', silent: false, lineStyle: { type: 'dashed', color: SERIES.validation }, data: lines } });
  chart('frontier', {
    animation: false,
    legend: { top: 0 },
    grid: { left: 10, right: 30, top: 40, bottom: 40, containLabel: true },
    xAxis: { type: 'value', name: 'model file size (bytes)', nameLocation: 'middle', nameGap: 28, scale: true, axisLabel: { formatter: (v) => fmtBytes(v) } },
    // Validation rounds and the budget are lines, which do not stretch the axis by themselves.
    yAxis: { type: 'value', name: `${metric.label}${metric.unit}`, scale: true, min: (e) => yRange(e, lines)[0], max: (e) => yRange(e, lines)[1] },
    tooltip: { trigger: 'item', formatter: (p) => p.componentType === 'markLine' ? p.name + ': ' + fmt(p.value) : `${p.seriesName}<br>${fmtBytes(p.value[0])}, ${fmt(p.value[1])}${metric.unit}${p.value[2] != null ? `<br>${fmt(p.value[2])} bits on average` : ''}` },
    series,
  });
}

function yRange(extent, lines) {
  const values = [extent.min, extent.max, ...lines.filter((l) => l.yAxis != null).map((l) => l.yAxis)];
  const low = Math.min(...values);
  const high = Math.max(...values);
  const pad = (high - low) * 0.05 || 1;
  // Round outward to a tenth of the span's power of ten, so the end labels read as numbers, not float noise.
  const step = 10 ** Math.floor(Math.log10(high - low + 2 * pad)) / 10;
  return [Math.floor((low - pad) / step) * step, Math.ceil((high + pad) / step) * step];
}

function validationValue(metrics, metric) {
  const byName = { 'sqnr': metrics.sqnrDb, 'relative-mse': metrics.relativeMse, 'top1': metrics.top1Agreement, 'kl': metrics.klDivergence, 'cosine': metrics.cosineSimilarity };
  return num(byName[Object.keys(METRICS).find((k) => metricOf(k) === metric)] ?? NaN);
}

function drawBits(layers) {
  chart('bits', {
    animation: false,
    legend: { top: 0 },
    grid: { left: 10, right: 30, top: 60, bottom: 40, containLabel: true },
    tooltip: { trigger: 'axis', axisPointer: { type: 'shadow' } },
    yAxis: { type: 'category', data: layers.map((l) => l.name + (layerState(l) ? ` (${layerState(l)})` : '')), inverse: true },
    xAxis: [
      { type: 'value', name: 'chosen bits', min: 0, max: 32, position: 'bottom', nameLocation: 'middle', nameGap: 24 },
      { type: 'log', name: 'parameters (log scale)', position: 'top', min: 1, nameLocation: 'middle', nameGap: 24 },
    ],
    series: [
      { name: 'chosen bits', type: 'bar', xAxisIndex: 0, data: layers.map((l) => l.bits ?? 32), color: SERIES.frontier, label: { show: true, position: 'right', formatter: (p) => layers[p.dataIndex].bits ?? 'FP32' } },
      { name: 'parameters', type: 'bar', xAxisIndex: 1, data: layers.map((l) => Math.max(1, l.parameters)), color: SERIES.params, barGap: '10%' },
    ],
  });
}

// ---- compare ----------------------------------------------------------------------------------------------

async function showCompare(a, b) {
  const comparison = await api(`/v1/searches/${encodeURIComponent(a)}/compare/${encodeURIComponent(b)}`);
  const { base, other, totals, layers } = comparison;
  const side = (s) => `${s.modelName} v${s.modelVersion}`;
  const metricBase = metricOf(base.metric);
  show(
    el('h1', {}, `Compare ${side(base)} with ${side(other)}`),
    comparison.sameModelName ? null : el('p', { class: 'warnings' }, 'These searches are of different model names; layers are matched by name and weight shape only.'),
    el('p', { class: 'note' }, el('a', { href: `#/search/${base.searchId}` }, `${side(base)}: ${base.searchId}`), ' · ',
      el('a', { href: `#/search/${other.searchId}` }, `${side(other)}: ${other.searchId}`)),
    el('div', { class: 'cards', id: 'compare-totals' },
      card('Quantized model file', `${fmtBytes(totals.modelFileBytes.base)} → ${fmtBytes(totals.modelFileBytes.other)}`),
      card('Average bits', `${fmt(totals.averageBits.base)} → ${fmt(totals.averageBits.other)}`),
      card(`Measured ${metricBase.label}`, `${fmt(totals.measured.base)} → ${fmt(totals.measured.other)}${metricBase.unit}`),
      card('Layers', `${totals.changedLayers} changed, ${totals.addedLayers} added, ${totals.removedLayers} removed`)),
    el('h2', {}, 'Bits per layer'),
    el('table', { id: 'compare-layers' },
      el('thead', {}, el('tr', {}, el('th', {}, 'Layer'), el('th', {}, 'Op'), el('th', {}, 'Weight shape'), el('th', { class: 'num' }, `Bits, ${side(base)}`),
        el('th', { class: 'num' }, `Bits, ${side(other)}`), el('th', { class: 'num' }, 'Change'), el('th', {}, 'Status'))),
      el('tbody', {}, layers.map((l) => el('tr', { 'data-layer': l.name, 'data-status': l.status },
        el('td', {}, l.name, l.otherName ? el('div', { class: 'note' }, `now ${l.otherName} (matched by ${l.matchedBy})`) : null),
        el('td', {}, l.op), el('td', {}, l.shape.join('×'), l.otherShape ? ` → ${l.otherShape.join('×')}` : ''),
        el('td', { class: 'num' }, bitsText(l.bits.base, l.status === 'added')), el('td', { class: 'num' }, bitsText(l.bits.other, l.status === 'removed')),
        el('td', { class: 'num' }, l.bits.change ? fmtSigned(l.bits.change, 0) : ''),
        el('td', {}, l.status, l.baseCoverage && l.baseCoverage !== 'exercised' ? ` (before: ${l.baseCoverage})` : '', l.otherCoverage && l.otherCoverage !== 'exercised' ? ` (now: ${l.otherCoverage})` : ''))))),
    el('h2', {}, 'Change in sensitivity'),
    el('p', { class: 'note' }, `Output SQNR of each layer alone at each width, ${side(other)} minus ${side(base)} (dB): orange = the layer got more sensitive, purple = less.`),
    chartBox('compare-heatmap', Math.max(220, 60 + 34 * layers.length)),
    el('h2', {}, 'Chosen bits side by side'),
    chartBox('compare-bits', Math.max(240, 60 + 34 * layers.length)));
  drawCompareHeatmap(layers);
  drawCompareBits(layers, side(base), side(other));
}

function bitsText(bits, absent) { return absent ? '—' : bits == null ? 'FP32' : bits; }

function drawCompareHeatmap(layers) {
  const widths = [...new Set(layers.flatMap((l) => l.sensitivity.map((w) => w.bits)))].sort((x, y) => x - y);
  const cells = [];
  layers.forEach((layer, row) => {
    for (const w of layer.sensitivity) {
      const change = num(w.sqnrDb.change);
      if (change !== null && change !== undefined && Number.isFinite(change)) cells.push({ value: [widths.indexOf(w.bits), row, change], layer: layer.name, width: w });
    }
  });
  const reach = Math.max(1, ...cells.map((c) => Math.abs(c.value[2])));
  chart('compare-heatmap', {
    animation: false,
    grid: { left: 10, right: 90, top: 10, bottom: 40, containLabel: true },
    xAxis: { type: 'category', data: widths.map(widthLabel), name: 'candidate width', nameLocation: 'middle', nameGap: 28, splitArea: { show: true } },
    yAxis: { type: 'category', data: layers.map((l) => l.name), inverse: true, splitArea: { show: true } },
    visualMap: { min: -reach, max: reach, calculable: true, right: 0, top: 'middle', text: ['less sensitive', 'more sensitive'], inRange: { color: DIVERGING } },
    tooltip: { formatter: (p) => `<b>${p.data.layer}</b> at ${widthLabel(p.data.width.bits)}<br>SQNR ${fmt(p.data.width.sqnrDb.base)} → ${fmt(p.data.width.sqnrDb.other)} dB (${fmtSigned(p.data.width.sqnrDb.change)})` },
    series: [{ name: 'SQNR change', type: 'heatmap', data: cells, label: { show: true, formatter: (p) => fmtSigned(p.value[2], 1) } }],
  });
}

function drawCompareBits(layers, baseName, otherName) {
  chart('compare-bits', {
    animation: false,
    legend: { top: 0 },
    grid: { left: 10, right: 30, top: 30, bottom: 30, containLabel: true },
    tooltip: { trigger: 'axis', axisPointer: { type: 'shadow' } },
    yAxis: { type: 'category', data: layers.map((l) => l.name), inverse: true },
    xAxis: { type: 'value', name: 'bits', min: 0, max: 32 },
    series: [
      { name: baseName, type: 'bar', data: layers.map((l) => (l.status === 'added' ? null : l.bits.base ?? 32)), color: SERIES.uniform8 },
      { name: otherName, type: 'bar', data: layers.map((l) => (l.status === 'removed' ? null : l.bits.other ?? 32)), color: SERIES.chosen },
    ],
  });
}

// ---- routing ----------------------------------------------------------------------------------------------

async function refresh(render) {
  try {
    await render();
  } catch (error) {
    if (!(error instanceof Unauthorized)) view.replaceChildren(el('p', { class: 'error', id: 'load-error' }, `Could not load: ${error.message}`));
  }
}

async function route() {
  stop();
  if (!key()) {
    askKey();
    return;
  }
  document.getElementById('forget-key').hidden = false;
  const parts = location.hash.replace(/^#\/?/, '').split('/').filter(Boolean).map(decodeURIComponent);
  if (parts[0] === 'search' && parts[1]) await refresh(() => showSearch(parts[1]));
  else if (parts[0] === 'compare' && parts[1] && parts[2]) await refresh(() => showCompare(parts[1], parts[2]));
  else await refresh(showList);
}

window.addEventListener('hashchange', route);
route();
