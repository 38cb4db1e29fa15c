// arcwright console. Talks only to this service's own routes: /v1/models, /v1/models/{name}/activate,
// /v1/scaling, /metrics and /v1/parse. No framework, no outside requests; all text from the API is
// put into the page with textContent, never as markup.
"use strict";

const SVG_NS = "http://www.w3.org/2000/svg";
const $ = (id) => document.getElementById(id);
const TRAFFIC_WINDOW_SECONDS = 600;
// Fewer sentences than this give slopes that mean nothing (R² near 0 is common with a handful).
const MIN_FIT_SENTENCES = 50;

const state = {
  models: [],
  traffic: [], // {t, requests, errors} rates per second
  lastCounts: null,
  lastParse: null, // {request, results: [{decoder, body}]}
  openedAt: Date.now() / 1000, // the traffic chart spans from here until it covers its window
};

// ---------------------------------------------------------------------------------------------
// Small helpers

function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [key, value] of Object.entries(attrs)) {
    if (value === undefined || value === null || value === false) continue;
    if (key === "class") node.className = value;
    else if (key.startsWith("on")) node.addEventListener(key.slice(2), value);
    else node.setAttribute(key, value === true ? "" : String(value));
  }
  for (const child of children.flat()) {
    if (child === null || child === undefined) continue;
    node.append(child instanceof Node ? child : document.createTextNode(String(child)));
  }
  return node;
}

function svg(tag, attrs = {}, text) {
  const node = document.createElementNS(SVG_NS, tag);
  for (const [key, value] of Object.entries(attrs)) {
    if (value !== undefined && value !== null) node.setAttribute(key, String(value));
  }
  if (text !== undefined) node.textContent = text;
  return node;
}

async function api(path, options = {}) {
  const headers = { ...(options.headers || {}) };
  if (options.body !== undefined) headers["content-type"] = "application/json";
  let response;
  try {
    response = await fetch(path, {
      method: options.method || (options.body !== undefined ? "POST" : "GET"),
      headers,
      body: options.body !== undefined ? JSON.stringify(options.body) : undefined,
      cache: "no-store",
    });
  } catch (error) {
    return { ok: false, status: 0, error: { code: "unreachable", message: "the service did not answer" } };
  }
  const text = await response.text();
  let body = null;
  try {
    body = text ? JSON.parse(text) : null;
  } catch (_) {
    body = null;
  }
  if (response.ok) return { ok: true, status: response.status, body };
  const error = (body && body.error) || { code: String(response.status), message: text || response.statusText };
  return { ok: false, status: response.status, error };
}

function formatBytes(n) {
  if (n >= 1 << 20) return (n / (1 << 20)).toFixed(1) + " MiB";
  if (n >= 1 << 10) return (n / (1 << 10)).toFixed(1) + " KiB";
  return n + " B";
}

// One time format everywhere on the page: UTC, ISO 8601 to the second ("2026-12-03 09:55:58Z"),
// the same clock as the store's publish times.
function formatTime(ms) {
  if (!ms) return "";
  return new Date(ms).toISOString().replace("T", " ").replace(/\.\d+Z$/, "Z");
}

function formatSeconds(s) {
  if (s >= 1) return s.toFixed(2) + " s";
  if (s >= 1e-3) return (s * 1e3).toFixed(s >= 0.1 ? 0 : 1) + " ms";
  return (s * 1e6).toFixed(0) + " µs";
}

function setStatus(ok, text) {
  const status = $("status");
  status.className = "status " + (ok ? "ok" : "down");
  status.replaceChildren(el("span", { class: "dot", "aria-hidden": "true" }), text);
}

function showMessage(node, text, isError) {
  node.hidden = !text;
  node.classList.add("message");
  node.classList.toggle("error", Boolean(isError));
  node.textContent = text || "";
}

// ---------------------------------------------------------------------------------------------
// Models

async function refreshModels() {
  const reply = await api("/v1/models");
  if (!reply.ok) {
    setStatus(false, "service unreachable: " + reply.error.message);
    return;
  }
  state.models = reply.body.models || [];
  state.adminRoutes = reply.body.admin_routes === true;
  // Without an admin token on the replica, promote and rollback cannot work: hide them.
  $("admin-row").hidden = !state.adminRoutes;
  $("admin-off").hidden = state.adminRoutes;
  const serving = state.models.filter((m) => m.serving);
  setStatus(
    serving.length > 0,
    serving.length > 0
      ? `ready · serving ${serving.map((m) => m.name + " " + m.serving.version).join(", ")}`
      : "no model loaded yet",
  );
  renderModels();
  fillModelPicker();
}

function previousLive(model) {
  // The version `live` pointed at before the current one: the latest successful swap into the
  // served version tells where it came from.
  const swaps = (model.swaps || []).filter((s) => s.ok && s.to === model.live && s.from);
  return swaps.length ? swaps[swaps.length - 1].from : null;
}

function renderModels() {
  const list = $("models-list");
  const cards = state.models.map((model) => {
    const servingVersion = model.serving ? model.serving.version : null;
    const head = el(
      "div",
      { class: "model-head" },
      el("h3", {}, model.name, model.default ? el("span", { class: "pill" }, "default") : null),
      el(
        "span",
        { class: "serving", "data-serving-model": model.name, "data-serving-version": servingVersion || "" },
        servingVersion ? `serving ${servingVersion}` : "not serving",
      ),
      model.serving
        ? el("span", {}, `loaded ${formatTime(model.serving.loaded_at_unix_ms)} in ${formatSeconds(model.serving.load_seconds)}`)
        : null,
      model.serving && model.serving.kind
        ? el("span", { class: "pill", "data-serving-kind": model.serving.kind }, model.serving.kind)
        : null,
      el("span", {}, "live → ", el("code", {}, model.live || "none")),
      servingVersion && model.live && servingVersion !== model.live
        ? el("span", { class: "pill warn" }, "switching to live…")
        : null,
    );
    const rollbackTo = previousLive(model);
    const rollback = el(
      "button",
      {
        type: "button",
        class: "secondary",
        disabled: !rollbackTo,
        title: rollbackTo ? `Point live back at ${rollbackTo}` : "No earlier live version seen by this replica",
        onclick: () => activate(model.name, rollbackTo, "roll back"),
      },
      rollbackTo ? `Roll back live to ${rollbackTo}` : "Roll back live",
    );
    const rows = (model.versions || [])
      .slice()
      .reverse()
      .map((v) => {
        const scores = v.scores && typeof v.scores === "object"
          ? ["uas", "las"].filter((k) => typeof v.scores[k] === "number").map((k) => `${k.toUpperCase()} ${v.scores[k].toFixed(2)}`).join(" · ")
          : "";
        const isLive = v.version === model.live;
        return el(
          "tr",
          { class: v.version === servingVersion ? "is-serving" : null },
          el("td", { class: "mono" }, v.version),
          el("td", { class: "kind" }, v.kind || "linear"),
          el("td", {}, v.created ? formatTime(Date.parse(v.created)) : ""),
          el("td", { class: "num" }, formatBytes(v.size_bytes || 0)),
          el("td", {}, (v.aliases || []).join(", ")),
          el("td", {}, scores),
          !state.adminRoutes ? null : el(
            "td",
            {},
            el(
              "button",
              {
                type: "button",
                class: "secondary promote",
                "data-version": v.version,
                disabled: isLive,
                title: isLive ? "Already live: live points at this version" : `Point live at ${v.version}`,
                onclick: () => activate(model.name, v.version, "promote"),
              },
              isLive ? "live" : "Make live",
            ),
          ),
        );
      });
    const versions = el(
      "div",
      { class: "scroll" },
      el(
        "table",
        {},
        el("caption", { class: "hint" }, `${(model.versions || []).length} version(s), newest first`),
        el("thead", {}, el("tr", {}, el("th", {}, "version"), el("th", {}, "kind"), el("th", {}, "published"), el("th", { class: "num" }, "size"),
          el("th", {}, "aliases"), el("th", {}, "scores"), state.adminRoutes ? el("th", {}, "") : null)),
        el("tbody", {}, rows),
      ),
    );
    const swaps = (model.swaps || []).slice(-5).reverse();
    const swapList = el(
      "div",
      { class: "scroll" },
      el(
        "table",
        { class: "swaps" },
        el("caption", { class: "hint" }, "Last swaps on this replica"),
        el("thead", {}, el("tr", {}, el("th", {}, "time"), el("th", {}, "from"), el("th", {}, "to"), el("th", {}, "result"))),
        el(
          "tbody",
          {},
          swaps.length
            ? swaps.map((s) =>
              el("tr", {}, el("td", {}, formatTime(s.at_unix_ms)), el("td", { class: "mono" }, s.from || "—"),
                el("td", { class: "mono" }, s.to), el("td", {}, s.ok ? "ok" : "failed: " + (s.message || ""))))
            : el("tr", {}, el("td", { colspan: 4 }, "none yet")),
        ),
      ),
    );
    const message = el("div", { class: "message admin-message", role: "alert", hidden: true });
    const pending = state.pendingMessage;
    if (pending && pending.name === model.name) showMessage(message, pending.text, pending.error);
    const admin = state.adminRoutes ? [el("p", {}, rollback), message] : [];
    return el("div", { class: "model-card", "data-model": model.name }, head, versions, ...admin, swapList);
  });
  // Keep keyboard focus where it was when the list is redrawn.
  const focused = document.activeElement;
  const focusKey = focused && focused.dataset ? focused.dataset.version : null;
  list.replaceChildren(...(cards.length ? cards : [el("p", {}, "No models in the store yet.")]));
  if (focusKey) {
    const again = list.querySelector(`button[data-version="${CSS.escape(focusKey)}"]`);
    if (again) again.focus();
  }
}

// The message goes next to the controls of the model whose button was pressed.
function adminMessageFor(name) {
  return document.querySelector(`[data-model="${CSS.escape(name)}"] .admin-message`) || $("admin-message");
}

async function activate(name, version, verb) {
  // Kept in the page state so that the message survives the model list being redrawn.
  const say = (text, error) => {
    state.pendingMessage = { name, text, error };
    showMessage(adminMessageFor(name), text, error);
  };
  const token = $("admin-token").value.trim();
  if (!version) return;
  if (!token) {
    say("Enter the admin token first (above the model list).", true);
    $("admin-token").focus();
    return;
  }
  say(`Asking to ${verb} ${name} to ${version}…`, false);
  const reply = await api(`/v1/models/${encodeURIComponent(name)}/activate`, {
    body: { version },
    headers: { authorization: "Bearer " + token },
  });
  if (!reply.ok) {
    say(`${verb} failed: ${reply.error.message}`, true);
    return;
  }
  say(`live → ${version}; waiting for this replica to load it…`, false);
  const deadline = Date.now() + 30000;
  while (Date.now() < deadline) {
    await refreshModels();
    const model = state.models.find((m) => m.name === name);
    if (model && model.serving && model.serving.version === version) {
      say(`${name} now serves ${version}.`, false);
      return;
    }
    await new Promise((r) => setTimeout(r, 500));
  }
  say(`live points at ${version}, but this replica has not loaded it yet; see the swaps table.`, true);
}

function fillModelPicker() {
  const pick = $("model-pick");
  const current = pick.value;
  const names = state.models.filter((m) => m.serving).map((m) => m.name);
  const same = names.length === pick.options.length && names.every((n, i) => pick.options[i].value === n);
  if (same) return;
  pick.replaceChildren(...names.map((n) => el("option", { value: n }, n)));
  const fallback = state.models.find((m) => m.default && m.serving);
  pick.value = names.includes(current) ? current : fallback ? fallback.name : names[0] || "";
}

// ---------------------------------------------------------------------------------------------
// Performance: latency by length (log–log) and traffic

/** The length bucket (power-of-two upper bound, at least 8) of a sentence of n tokens. */
function bucketOf(n) {
  let b = 8;
  while (b < n) b *= 2;
  return b;
}

function logScale(min, max, from, to) {
  const a = Math.log(min), b = Math.log(max);
  return (v) => from + ((Math.log(v) - a) / (b - a)) * (to - from);
}

async function refreshScaling() {
  const reply = await api("/v1/scaling");
  if (!reply.ok) return;
  drawLatency(reply.body);
  $("refresh-note").textContent = "updated " + formatTime(Date.now());
}

function drawLatency(report) {
  const stage = $("stage-pick").value;
  const decoders = ["projective", "non-projective"];
  // Observed medians at each bucket's median length (as the cost model sees them) when a cost
  // model exists, else at the bucket's upper bound; the probe's points (decode stage only: the
  // probe times the decoders alone) at its synthetic lengths.
  const probeRun = report.probe && report.probe.last;
  const series = decoders.map((decoder) => {
    const entry = (report.cost_models || []).find((m) => m.stage === stage && m.decoder === decoder);
    const model = entry ? entry.model : null;
    const counts = Object.fromEntries((report.buckets || [])
      .filter((b) => b.stage === stage && b.decoder === decoder)
      .map((b) => [b.length_bucket, b.count]));
    const points = model
      ? model.buckets.map(([x, y]) => ({ x, y, count: counts[String(bucketOf(x))] || 0 }))
      : (report.buckets || [])
        .filter((b) => b.stage === stage && b.decoder === decoder && b.length_bucket !== "+Inf" && b.p50_seconds > 0)
        .map((b) => ({ x: Number(b.length_bucket), y: b.p50_seconds, count: b.count }));
    const probed = stage === "decode" && probeRun
      ? ((probeRun.decoders || []).find((d) => d.decoder === decoder) || { points: [] })
      : null;
    return {
      decoder,
      points: points.filter((p) => p.x > 0 && p.y > 0).sort((p, q) => p.x - q.x),
      model,
      probe: probed ? probed.points.filter((p) => p.cpu_seconds > 0).map((p) => ({ x: p.tokens, y: p.cpu_seconds })) : [],
      probeResult: probed,
      fit: (report.fits || []).find((f) => f.stage === stage && f.decoder === decoder),
    };
  });
  const all = series.flatMap((s) => s.points.concat(s.probe));
  const W = 560, H = 320, L = 58, R = 16, T = 14, B = 40;
  const root = svg("svg", { viewBox: `0 0 ${W} ${H}`, role: "img", "aria-label": `median ${stage} latency by sentence length` });
  if (all.length === 0) {
    root.append(svg("text", { x: W / 2, y: H / 2, "text-anchor": "middle" }, `no ${stage} timings yet — parse some sentences`));
    $("latency-chart").replaceChildren(root);
    $("latency-caption").textContent = "Waiting for parses…";
    return;
  }
  // Reference slopes 2 and 3 start at the first point of the first series with data and run
  // over the measured lengths, at least three octaves, so the two are visibly different.
  const anchor = (series.find((s) => s.points.length) || series.find((s) => s.probe.length))
    .points.concat(series.flatMap((s) => s.probe))[0];
  const lastX = Math.max(...all.map((p) => p.x));
  const guideEnd = Math.min(512, Math.max(lastX, anchor.x * 8));
  // Axes fitted to the data: from half the shortest bucket to a little past the guides' end.
  const xMin = Math.max(1, Math.min(...all.map((p) => p.x)) / 1.5), xMax = guideEnd * 1.6;
  let yMin = Math.min(...all.map((p) => p.y)) / 2;
  let yMax = Math.max(Math.max(...all.map((p) => p.y)), anchor.y * Math.pow(guideEnd / anchor.x, 3)) * 2;
  if (yMax / yMin < 1000) yMin = yMax / 1000;
  const sx = logScale(xMin, xMax, L, W - R), sy = logScale(yMin, yMax, H - B, T);
  for (let x = 2; x <= 1024; x *= 2) {
    if (x < xMin || x > xMax) continue;
    root.append(svg("line", { class: "grid", x1: sx(x), x2: sx(x), y1: T, y2: H - B }));
    root.append(svg("text", { x: sx(x), y: H - B + 14, "text-anchor": "middle" }, String(x)));
  }
  for (let e = Math.ceil(Math.log10(yMin)); e <= Math.floor(Math.log10(yMax)); e++) {
    const v = Math.pow(10, e);
    root.append(svg("line", { class: "grid", x1: L, x2: W - R, y1: sy(v), y2: sy(v) }));
    root.append(svg("text", { x: L - 6, y: sy(v) + 4, "text-anchor": "end" }, formatSeconds(v)));
  }
  root.append(svg("line", { class: "axis", x1: L, x2: W - R, y1: H - B, y2: H - B }));
  root.append(svg("line", { class: "axis", x1: L, x2: L, y1: T, y2: H - B }));
  root.append(svg("text", { x: (L + W - R) / 2, y: H - 6, "text-anchor": "middle" }, "sentence length (tokens)"));
  for (const slope of [2, 3]) {
    const y2 = anchor.y * Math.pow(guideEnd / anchor.x, slope);
    root.append(svg("line", { class: "guide", x1: sx(anchor.x), y1: sy(anchor.y), x2: sx(guideEnd), y2: sy(y2) }));
    root.append(svg("text", { x: sx(guideEnd) + 4, y: sy(y2) + 4, "text-anchor": "start" }, `slope ${slope}`));
  }
  const captions = [];
  for (const s of series) {
    if (!s.points.length) continue;
    const cls = "series-" + s.decoder;
    for (const p of s.points) {
      const dot = svg("circle", { class: cls, cx: sx(p.x), cy: sy(p.y), r: 3.5 });
      dot.append(svg("title", {}, `${s.decoder}, ${Math.round(p.x)} tokens (bucket median): median ${formatSeconds(p.y)} over ${p.count} sentences`));
      root.append(dot);
    }
    if (s.model) {
      // The cost model t(n) = a + l·n + b·n² + c·n³, drawn across the plot.
      const m = s.model;
      const t = (n) => m.a + m.l * n + m.b * n * n + m.c * n * n * n;
      const steps = 60;
      const path = [];
      for (let i = 0; i <= steps; i++) {
        const x = xMin * Math.pow(xMax / xMin, i / steps);
        const y = t(x);
        if (y >= yMin && y <= yMax) path.push(`${path.length ? "L" : "M"}${sx(x).toFixed(1)},${sy(y).toFixed(1)}`);
      }
      const curve = svg("path", { class: "cost-model " + cls, d: path.join(" ") });
      curve.append(svg("title", {}, `${s.decoder} cost model: ${formatSeconds(m.a)} + ${formatSeconds(m.l)}·n + ` +
        `${m.b.toExponential(2)} s·n² + ${m.c.toExponential(2)} s·n³`));
      root.append(curve);
    }
    for (const p of s.probe) {
      const mark = svg("rect", { class: "probe " + cls, x: sx(p.x) - 4, y: sy(p.y) - 4, width: 8, height: 8 });
      mark.append(svg("title", {}, `${s.decoder} probe, ${p.x} words: ${formatSeconds(p.y)} CPU per decode`));
      root.append(mark);
    }
    const fitted = s.fit && s.fit.samples >= MIN_FIT_SENTENCES;
    if (s.probeResult) {
      const r = s.probeResult;
      captions.push(`${s.decoder} probe: slope ${r.exponent.toFixed(2)} from ${r.expected.fitted_from} words ` +
        `(expected ${r.expected.band[0]}–${r.expected.band[1]}), ${r.speedup_over_textbook.toFixed(1)}× the textbook ` +
        `version: ${r.consistent ? "consistent" : "NOT consistent"}`);
    }
    if (s.model && s.model.cubic_dominates_from) {
      captions.push(`${s.decoder}: the cubic term is the larger part from ${s.model.cubic_dominates_from} tokens`);
    }
    captions.push(fitted
      ? `${s.decoder}: fitted slope ${s.fit.exponent.toFixed(2)} (R² ${s.fit.r_squared.toFixed(2)}, ${s.fit.samples} recent sentences of ≥ ${report.min_tokens} tokens)`
      : `${s.decoder}: a slope is shown from ${MIN_FIT_SENTENCES} sentences of ≥ ${report.min_tokens} tokens ` +
        `(${s.fit ? s.fit.samples : 0} so far)`);
  }
  const legend = svg("g", {});
  series.forEach((s, i) => {
    legend.append(svg("rect", { class: "series-" + s.decoder, x: W - R - 120, y: H - B - 40 + i * 16, width: 10, height: 10 }));
    legend.append(svg("text", { x: W - R - 104, y: H - B - 31 + i * 16 }, s.decoder));
  });
  root.append(legend);
  $("latency-chart").replaceChildren(root);
  $("latency-caption").textContent = `Median ${stage} time per sentence (dots), its cost model (curve)` +
    (stage === "decode" ? ", the decoder probe (squares)" : "; choose the decode stage to see the decoder probe") +
    ". " + captions.join("; ") + ".";
}

function parseCounters(text) {
  let requests = 0, errors = 0;
  for (const line of text.split("\n")) {
    if (!line.startsWith("arcwright_requests_total{")) continue;
    const value = Number(line.slice(line.lastIndexOf(" ") + 1));
    const code = /code="([^"]*)"/.exec(line);
    requests += value;
    if (code && code[1].toLowerCase() !== "ok") errors += value;
  }
  return { requests, errors };
}

async function refreshTraffic() {
  let text;
  try {
    const response = await fetch("/metrics", { cache: "no-store" });
    if (!response.ok) return;
    text = await response.text();
  } catch (_) {
    return;
  }
  const now = Date.now() / 1000;
  const counts = parseCounters(text);
  if (state.lastCounts) {
    const dt = now - state.lastCounts.t;
    if (dt > 0) {
      state.traffic.push({
        t: now,
        requests: Math.max(0, counts.requests - state.lastCounts.requests) / dt,
        errors: Math.max(0, counts.errors - state.lastCounts.errors) / dt,
      });
    }
  }
  state.lastCounts = { t: now, ...counts };
  state.traffic = state.traffic.filter((p) => now - p.t <= TRAFFIC_WINDOW_SECONDS);
  drawTraffic(now);
}

function drawTraffic(now) {
  const W = 560, H = 320, L = 58, R = 16, T = 14, B = 40;
  const root = svg("svg", { viewBox: `0 0 ${W} ${H}`, role: "img", "aria-label": "requests and errors per second" });
  const points = state.traffic;
  const yMax = Math.max(1, ...points.map((p) => p.requests)) * 1.15;
  // The time axis grows from the moment the page opened (at least one minute) until it covers
  // the whole window, then slides.
  const span = Math.min(TRAFFIC_WINDOW_SECONDS, Math.max(60, now - state.openedAt));
  const sx = (t) => L + ((t - (now - span)) / span) * (W - R - L);
  const sy = (v) => H - B - (v / yMax) * (H - B - T);
  for (let i = 0; i <= 4; i++) {
    const v = (yMax / 4) * i;
    root.append(svg("line", { class: "grid", x1: L, x2: W - R, y1: sy(v), y2: sy(v) }));
    root.append(svg("text", { x: L - 6, y: sy(v) + 4, "text-anchor": "end" }, v >= 10 ? v.toFixed(0) : v.toFixed(1)));
  }
  for (let k = 0; k <= 5; k++) {
    const age = (span * k) / 5;
    const label = k === 0 ? "now" : age < 120 ? `−${Math.round(age)} s` : `−${(age / 60).toFixed(1).replace(/\.0$/, "")} min`;
    root.append(svg("text", { x: sx(now - age), y: H - B + 14, "text-anchor": "middle" }, label));
  }
  root.append(svg("line", { class: "axis", x1: L, x2: W - R, y1: H - B, y2: H - B }));
  root.append(svg("text", { x: (L + W - R) / 2, y: H - 6, "text-anchor": "middle" }, "requests/s on this replica (all APIs)"));
  for (const p of points) {
    if (p.errors > 0) {
      root.append(svg("rect", { class: "error-bar", x: sx(p.t) - 2, y: sy(p.errors), width: 4, height: H - B - sy(p.errors) }));
    }
  }
  if (points.length >= 2) {
    const d = points.map((p, i) => `${i ? "L" : "M"}${sx(p.t).toFixed(1)},${sy(p.requests).toFixed(1)}`).join(" ");
    root.append(svg("path", { class: "traffic-line", d }));
  }
  $("traffic-chart").replaceChildren(root);
  const last = points[points.length - 1];
  $("traffic-caption").textContent = last
    ? `Now ${last.requests.toFixed(1)} requests/s, ${last.errors.toFixed(1)} errors/s (sampled every 2 s since this page opened; last 10 minutes).`
    : "Collecting the first samples…";
}

// ---------------------------------------------------------------------------------------------
// Try a sentence

function requestBody(decoder) {
  const text = $("sentence").value;
  const kind = document.querySelector('input[name="input-kind"]:checked').value;
  const body = { confidence: $("confidence-pick").checked };
  const model = $("model-pick").value;
  if (model) body.model = model;
  if (decoder) body.decoder = decoder;
  if (kind === "tokens") body.tokens = text.split(/\s+/).filter((t) => t.length > 0);
  else body.text = text;
  return body;
}

async function parse(event) {
  if (event) event.preventDefault();
  const button = $("parse-button");
  const compare = $("compare-pick").checked;
  const decoders = compare ? ["projective", "non-projective"] : [$("decoder-pick").value];
  button.disabled = true;
  showMessage($("parse-error"), "", true);
  const started = performance.now();
  try {
    const replies = await Promise.all(decoders.map((d) => api("/v1/parse", { body: requestBody(d) })));
    const failed = replies.find((r) => !r.ok);
    if (failed) {
      showMessage($("parse-error"), `${failed.error.message} (${failed.error.code})`, true);
      $("parse-result").hidden = true;
      return;
    }
    const results = replies.map((r, i) => ({ decoder: decoders[i], body: r.body }));
    state.lastParse = { results, ms: performance.now() - started };
    renderParse();
  } finally {
    button.disabled = false;
  }
}

function crossingArcs(heads) {
  // heads[i] = head of word i+1; arcs as spans between positions (0 = root, left of every word).
  const spans = heads.map((h, i) => [Math.min(h, i + 1), Math.max(h, i + 1)]);
  const crossing = new Set();
  for (let a = 0; a < spans.length; a++) {
    for (let b = a + 1; b < spans.length; b++) {
      const [l1, r1] = spans[a], [l2, r2] = spans[b];
      if ((l1 < l2 && l2 < r1 && r1 < r2) || (l2 < l1 && l1 < r2 && r2 < r1)) {
        crossing.add(a);
        crossing.add(b);
      }
    }
  }
  return crossing;
}

let measureContext = null;
function textWidth(text, font) {
  if (!measureContext) measureContext = document.createElement("canvas").getContext("2d");
  measureContext.font = font;
  return measureContext.measureText(text).width;
}

// The arc view ("hanging brackets"): words on a line with their tags under them, and every arc
// hangs below as a bracket — down from its head, along its own row, up into its dependent. A
// small filled square marks the head end, a ring the dependent end; the label sits in a box on
// the bracket's row. Rows are assigned in order of span (shortest first): an arc takes the row
// below every placed arc whose extent (bracket plus label box) overlaps its own, so two labels
// never share a row where they could touch, and a longer arc always runs beneath the shorter
// ones it encloses. A head's ports are spread over its word, farther dependents on the outside,
// so nested brackets never cross. The root word carries a diamond above it. Arcs in a crossing
// are drawn dashed in the crossing colour; in a comparison, arcs whose head differs between the
// decoders are drawn in the comparison colour.
const TREE = { wordY: 40, tagY: 56, baseY: 66, row: 22, gap: 22, labelHeight: 15 };

function layoutArcs(tokens, xs, widths, labelWidth) {
  const n = tokens.length;
  // Ports: each head's dependents, farthest first on each side, spread over the word's width.
  const port = new Array(n).fill(0);
  for (let h = 1; h <= n; h++) {
    const deps = [];
    tokens.forEach((t, i) => { if (t.head === h) deps.push(i + 1); });
    const left = deps.filter((d) => d < h).sort((a, b) => a - b);
    const right = deps.filter((d) => d > h).sort((a, b) => b - a);
    const half = widths[h - 1] / 2 - 2;
    left.forEach((d, j) => { port[d - 1] = xs[h - 1] - half * (left.length - j) / (left.length + 1) - 2; });
    right.forEach((d, j) => { port[d - 1] = xs[h - 1] + half * (right.length - j) / (right.length + 1) + 2; });
  }
  const arcs = tokens.map((t, i) => {
    if (t.head === 0) return null;
    const hx = port[i], dx = xs[i];
    const left = Math.min(hx, dx), right = Math.max(hx, dx);
    const mid = (left + right) / 2, lw = labelWidth(t.label);
    return { i, hx, dx, left, right, mid, lw,
      from: Math.min(left, mid - lw / 2) - 3, to: Math.max(right, mid + lw / 2) + 3 };
  });
  const placed = [];
  arcs.filter(Boolean)
    .sort((a, b) => (a.right - a.left) - (b.right - b.left) || a.left - b.left)
    .forEach((arc) => {
      let row = 1;
      for (const other of placed) {
        if (other.from < arc.to && arc.from < other.to) row = Math.max(row, other.row + 1);
      }
      arc.row = row;
      placed.push(arc);
    });
  return arcs;
}

function drawTree(tokens, title, otherHeads) {
  const heads = tokens.map((t) => t.head);
  const crossing = crossingArcs(heads);
  const family = getComputedStyle(document.body).fontFamily;
  const widths = tokens.map((t) => Math.max(textWidth(t.form, `15px ${family}`), textWidth(t.tag || "", `11px ${family}`), 28));
  const labelWidth = (label) => textWidth(label || "", `11px ${family}`) + 10;
  const xs = [];
  let x = 20;
  for (const w of widths) {
    xs.push(x + w / 2);
    x += w + TREE.gap;
  }
  const width = Math.max(x, 200);
  const arcs = layoutArcs(tokens, xs, widths, labelWidth);
  const rows = Math.max(0, ...arcs.filter(Boolean).map((a) => a.row));
  const height = TREE.baseY + rows * TREE.row + TREE.labelHeight;
  const root = svg("svg", {
    class: "tree", width, height, viewBox: `0 0 ${width} ${height}`, role: "img",
    "aria-label": `${title}: dependency tree of ${tokens.length} words`,
  });
  tokens.forEach((t, i) => {
    root.append(svg("text", { class: "word", x: xs[i], y: TREE.wordY, "text-anchor": "middle" }, t.form));
    root.append(svg("text", { class: "tag", x: xs[i], y: TREE.tagY, "text-anchor": "middle" }, t.tag || ""));
  });
  const labels = [];
  tokens.forEach((t, i) => {
    const m = i + 1;
    const confidence = typeof t.confidence === "number" ? Math.max(0, Math.min(1, t.confidence)) : null;
    const classes = ["arc"];
    if (crossing.has(i)) classes.push("crossing");
    if (otherHeads && otherHeads[i] !== t.head) classes.push("differs");
    const headForm = t.head === 0 ? "the root" : tokens[t.head - 1].form;
    const hover = `${headForm} → ${t.form}: ${t.label}` + (confidence === null ? "" : `, confidence ${confidence.toFixed(3)}`);
    let d, box;
    if (t.head === 0) {
      classes.push("root");
      d = `M${xs[i]},12 V${TREE.wordY - 16}`;
      root.append(svg("path", { class: "root-mark", d: `M${xs[i]},2 l5,5 l-5,5 l-5,-5 Z` }));
      const lw = labelWidth(t.label);
      box = { x: Math.min(xs[i] + 8, width - lw - 2), y: 0, w: lw };
    } else {
      const arc = arcs[i];
      const y = TREE.baseY + arc.row * TREE.row;
      d = `M${arc.hx},${TREE.baseY} V${y} H${arc.dx} V${TREE.baseY + 4}`;
      root.append(svg("rect", { class: "head-mark" + (crossing.has(i) ? " crossing" : ""),
        x: arc.hx - 2.5, y: TREE.baseY - 2.5, width: 5, height: 5 }));
      root.append(svg("circle", { class: "dependent-mark" + (crossing.has(i) ? " crossing" : ""),
        cx: arc.dx, cy: TREE.baseY + 1, r: 3 }));
      const bx = Math.max(2, Math.min(arc.mid - arc.lw / 2, width - arc.lw - 2));
      box = { x: bx, y: y - TREE.labelHeight / 2, w: arc.lw };
    }
    const path = svg("path", {
      class: classes.join(" "), d,
      "data-head": t.head, "data-dependent": m, "data-label": t.label,
      "data-confidence": confidence === null ? "" : confidence.toFixed(4),
    });
    path.append(svg("title", {}, hover));
    root.append(path);
    labels.push({ box, m, label: t.label, hover, classes });
  });
  // Labels last, so no bracket is drawn over one.
  for (const { box, m, label, hover, classes } of labels) {
    const group = svg("g", { class: "arc-label-group" });
    group.append(svg("rect", { class: "label-box " + classes.filter((c) => c !== "arc").join(" "),
      x: box.x, y: box.y, width: box.w, height: TREE.labelHeight, rx: 3, "data-dependent": m }));
    group.append(svg("text", { class: "arc-label", x: box.x + box.w / 2, y: box.y + 11,
      "text-anchor": "middle", "data-dependent": m }, label));
    group.append(svg("title", {}, hover));
    root.append(group);
  }
  const crossings = crossing.size;
  const differs = otherHeads ? heads.filter((h, i) => h !== otherHeads[i]).length : 0;
  return el(
    "div",
    { class: "diagram", "data-decoder": title },
    el("h3", {}, title, crossings ? ` · ${crossings} arcs in crossings` : " · no crossing arcs",
      otherHeads ? ` · ${differs} head(s) differ` : ""),
    el("div", { class: "scroll" }, root),
  );
}

// The layered view, for long sentences: one line per word in tree order (a head before its
// dependents, dependents in sentence order), indented by depth, each with its label, tag and
// position, so a sentence of any length reads top to bottom without horizontal scrolling.
function drawLayers(tokens, title, otherHeads) {
  const children = new Map();
  tokens.forEach((t, i) => {
    if (!children.has(t.head)) children.set(t.head, []);
    children.get(t.head).push(i + 1);
  });
  const lines = [];
  const seen = new Set();
  const visit = (id, depth) => {
    for (const child of children.get(id) || []) {
      if (seen.has(child)) continue;
      seen.add(child);
      const t = tokens[child - 1];
      const classes = ["layer"];
      if (otherHeads && otherHeads[child - 1] !== t.head) classes.push("differs");
      const line = el("li", { class: classes.join(" "), "data-dependent": child, "data-head": t.head },
        el("span", { class: "layer-label" }, t.label), " ",
        el("span", { class: "layer-form" }, t.form), " ",
        el("span", { class: "layer-tag" }, t.tag || ""), " ",
        el("span", { class: "layer-id" }, `#${child}` + (t.head === 0 ? "" : ` → #${t.head}`)));
      // Through the CSS object model: the page's policy refuses inline style attributes.
      line.style.setProperty("--depth", String(depth));
      lines.push(line);
      visit(child, depth + 1);
    }
  };
  visit(0, 0);
  return el("div", { class: "diagram", "data-decoder": title },
    el("h3", {}, title, " · layers"),
    el("ol", { class: "layers", "aria-label": `${title}: dependency tree as layers` }, lines));
}

function conllu(results) {
  const first = results[0];
  const lines = [];
  first.body.sentences.forEach((sentence, k) => {
    lines.push(`# sent_id = ${k + 1}`);
    lines.push(`# text = ${sentence.tokens.map((t) => t.form).join(" ")}`);
    lines.push(`# arcwright_model = ${first.body.model.name} ${first.body.model.version}`);
    for (const t of sentence.tokens) {
      const field = (v) => (v === undefined || v === null || v === "" ? "_" : String(v).replace(/[\t\n]/g, " "));
      lines.push([t.id, field(t.form), "_", field(t.tag), "_", "_", t.head, field(t.label), "_", "_"].join("\t"));
    }
    lines.push("");
  });
  return lines.join("\n") + "\n";
}

function renderParse() {
  const { results, ms } = state.lastParse;
  const first = results[0].body;
  const decoderNames = results.map((r) => r.decoder || "model default");
  $("result-meta").textContent = `${first.model.name} ${first.model.version} · ${decoderNames.join(" vs ")} · ` +
    `${first.sentences.length} sentence(s) · ${ms.toFixed(0)} ms round trip`;
  const diagrams = $("diagrams");
  diagrams.className = "diagrams" + (results.length > 1 ? " pair" : "");
  const blocks = [];
  first.sentences.forEach((_, k) => {
    results.forEach((r, j) => {
      const tokens = r.body.sentences[k].tokens;
      const other = results.length > 1 ? results[1 - j].body.sentences[k].tokens.map((t) => t.head) : null;
      const title = (results.length > 1 || first.sentences.length > 1 ? `sentence ${k + 1}, ` : "") + (r.decoder || "model default");
      const view = $("view-pick").value === "layers" ? drawLayers : drawTree;
      blocks.push(view(tokens, title, other));
    });
  });
  const legend = el("p", { class: "legend" },
    el("span", { class: "mark head" }), "head end ", el("span", { class: "mark dependent" }), "dependent end ",
    el("span", { class: "mark root" }), "root ",
    el("span", { class: "sw crossing" }), "arc in a crossing ",
    results.length > 1 ? [el("span", { class: "sw differs" }), "head differs between decoders "] : null,
    "· Confidences (calibrated probabilities) are in the table and on hover; the drawing does not vary with them.");
  diagrams.replaceChildren(...blocks, legend);
  const tables = results.flatMap((r) =>
    r.body.sentences.map((sentence, k) =>
      el("div", { class: "scroll" },
        el("table", { class: "parse-table", "data-decoder": r.decoder || "" },
          el("caption", { class: "hint" }, `${r.decoder || "model default"}, sentence ${k + 1}`),
          el("thead", {}, el("tr", {}, el("th", { class: "num" }, "id"), el("th", {}, "form"), el("th", {}, "tag"),
            el("th", {}, "head"), el("th", {}, "label"), el("th", { class: "num" }, "confidence"))),
          el("tbody", {}, sentence.tokens.map((t) =>
            el("tr", {},
              el("td", { class: "num" }, t.id), el("td", {}, t.form), el("td", {}, t.tag),
              el("td", {}, t.head === 0 ? "0 (root)" : `${t.head} ${sentence.tokens[t.head - 1].form}`),
              el("td", {}, t.label),
              el("td", { class: "num" }, typeof t.confidence === "number" ? t.confidence.toFixed(3) : "—"))))))));
  $("tables").replaceChildren(...tables);
  $("conllu-text").textContent = conllu(results);
  $("copy-note").textContent = "";
  $("parse-result").hidden = false;
}

async function copyConllu() {
  const text = $("conllu-text").textContent;
  try {
    await navigator.clipboard.writeText(text);
    $("copy-note").textContent = "Copied.";
  } catch (_) {
    // Clipboard refused (permissions): select the text so Ctrl+C copies it.
    const pre = $("conllu-text");
    pre.closest("details").open = true;
    const range = document.createRange();
    range.selectNodeContents(pre);
    const selection = window.getSelection();
    selection.removeAllRanges();
    selection.addRange(range);
    $("copy-note").textContent = "Selected: press Ctrl+C to copy.";
  }
}

// ---------------------------------------------------------------------------------------------
// Rollout

function share(x) {
  return x === null || x === undefined ? "–" : (100 * x).toFixed(1) + "%";
}

async function refreshRollout() {
  const list = $("rollout-list");
  const names = state.models.filter((m) => m.serving).map((m) => m.name);
  const blocks = [];
  for (const name of names) {
    const reply = await api(`/v1/models/${encodeURIComponent(name)}/rollout`);
    if (!reply.ok) continue;
    const r = reply.body;
    const head = el("p", {},
      el("strong", {}, name), ` · live ${r.live_version} · `,
      r.candidate_version && r.candidate_version !== r.live_version
        ? `candidate ${r.candidate_version} (${r.shadowing ? "shadowed, " + share(r.policy.sample) + " of requests" : "not shadowed"})`
        : "no candidate",
      ` · ${r.policy.mode} promotion (at least ${r.policy.min_sentences} sentences, head agreement ≥ ${share(r.policy.min_agreement)}, latency ratio ≤ ${r.policy.max_latency_ratio})`);
    const block = el("div", { class: "rollout-model" }, head);
    const shadow = r.shadow;
    if (shadow) {
      const row = (b) => el("tr", {},
        el("td", {}, b.length_bucket === "all" ? "all" : "≤ " + b.length_bucket),
        el("td", { class: "num" }, String(b.sentences)),
        el("td", { class: "num" }, share(b.head_agreement)),
        el("td", { class: "num" }, share(b.label_agreement)),
        el("td", { class: "num" }, b.latency_ratio === null ? "–" : b.latency_ratio.toFixed(2) + "×"),
        el("td", { class: "num" }, String(b.errors)));
      block.append(el("table", { class: "rollout-table" },
        el("thead", {}, el("tr", {}, ...["length", "sentences", "same head", "same head and label", "CPU ratio", "errors"]
          .map((h) => el("th", { scope: "col" }, h)))),
        el("tbody", {}, ...shadow.buckets.map(row), row(shadow.total))));
      const verdict = shadow.decision
        ? `decision: ${shadow.decision}${shadow.reason ? " — " + shadow.reason : ""}`
        : shadow.gates.verdict === "waiting"
          ? `waiting for ${shadow.gates.sentences_needed} more sentences`
          : `gates say: ${shadow.gates.verdict} — ${shadow.gates.reason}`;
      block.append(el("p", { class: "rollout-verdict" }, verdict + ` · ${shadow.shed} samples shed while busy`));
    }
    if (r.audit && r.audit.length) {
      block.append(el("ul", { class: "rollout-audit" }, ...r.audit.slice(0, 5).map((e) =>
        el("li", {}, `${e.time} · ${e.action} ${e.alias} ${e.from || "–"} → ${e.to} · ${e.actor} · ${e.reason}`))));
    }
    blocks.push(block);
  }
  list.replaceChildren(...(blocks.length ? blocks : [el("p", { class: "hint" }, "no model served yet")]));
}

// ---------------------------------------------------------------------------------------------
// Start-up and polling

function every(seconds, task) {
  const run = async () => {
    if (!document.hidden) {
      try {
        await task();
      } catch (error) {
        console.error(error);
      }
    }
    setTimeout(run, seconds * 1000);
  };
  run();
}

document.addEventListener("DOMContentLoaded", () => {
  $("parse-form").addEventListener("submit", parse);
  $("sentence").addEventListener("keydown", (e) => {
    if (e.key === "Enter" && (e.ctrlKey || e.metaKey)) parse(e);
  });
  $("copy-conllu").addEventListener("click", copyConllu);
  $("stage-pick").addEventListener("change", refreshScaling);
  $("view-pick").addEventListener("change", () => {
    if (state.lastParse) renderParse();
  });
  $("compare-pick").addEventListener("change", () => {
    $("decoder-pick").disabled = $("compare-pick").checked;
  });
  every(3, refreshModels);
  every(4, refreshRollout);
  every(5, refreshScaling);
  every(2, refreshTraffic);
});
