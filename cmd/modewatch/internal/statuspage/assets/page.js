// modewatch status page: three views over the service's page data, kept
// live by server-sent events read with fetch (so the bearer token travels
// in the Authorization header), resuming by itself after a lost connection.
"use strict";

const state = {
  token: sessionStorage.getItem("modewatch-token") || "",
  me: null,            // {identity, ops, severities, interval_s}
  stream: null,        // AbortController of the open event stream
  view: null,          // latest view data
  route: null,
  filters: { unit: "", severity: "", closed: false },
  window: "1h",
  lastEvent: 0,
  events: 0,           // view events received since the page loaded
};

const $ = (id) => document.getElementById(id);
const esc = (s) => String(s ?? "").replace(/[&<>"']/g, (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;" })[c]);
const fmt = (x, d = 2) => (x == null || !isFinite(x) ? "—" : Math.abs(x) >= 1000 ? x.toExponential(2) : x.toFixed(d));
const pct = (x) => (x == null ? "—" : (100 * x).toFixed(0) + "%");
const sleep = (ms, signal) => new Promise((res) => { const t = setTimeout(res, ms); signal && signal.addEventListener("abort", () => { clearTimeout(t); res(); }); });

// short drops the unit's name from a channel name shown inside that unit.
function short(unit, ch) {
  return ch.startsWith(unit + ".") ? ch.slice(unit.length + 1) : ch;
}

function when(s) {
  if (!s) return "—";
  const d = new Date(s);
  return d.toISOString().replace("T", " ").slice(0, 16) + "Z";
}

function headers(extra) {
  const h = Object.assign({}, extra || {});
  if (state.token) h.Authorization = "Bearer " + state.token;
  return h;
}

class AuthError extends Error {}

async function getJSON(url) {
  const res = await fetch(url, { headers: headers(), cache: "no-store" });
  if (res.status === 401) throw new AuthError("a token with read permission is needed");
  if (res.status === 403) throw new AuthError("this token may not read the status page");
  if (!res.ok) throw new Error(url + ": " + res.status + " " + (await res.text()));
  return res.json();
}

// ---- severity coding: colour, shape and word together -------------------

function sevClass(name) {
  const known = ["high", "medium", "low"];
  return known.includes(name) ? "sev-" + name : "sev-other";
}
function sevBadge(r) {
  if (r.kind === "notice") return `<span class="tag" title="informational, not an alarm">notice</span>`;
  if (r.group === "quality") return `<span class="sev sev-quality" title="data quality">${esc(r.severity || "quality")}</span>`;
  return `<span class="sev ${sevClass(r.severity)}">${esc(r.severity)}</span>`;
}
function sevColour(name) {
  return { high: "var(--high)", medium: "var(--medium)", low: "var(--low)" }[name] || "var(--ink)";
}

// ---- live event stream ----------------------------------------------------

function setLive(s, text) {
  const el = $("live");
  el.dataset.state = s;
  el.textContent = text || s;
}

function closeStream() {
  if (state.stream) state.stream.abort();
  state.stream = null;
}

// openStream reads /page/events?… with fetch and calls onView for every
// "view" event. On a closed or refused connection it waits (the server's
// Retry-After, else a growing backoff up to 10 s) and opens it again,
// sending the last event id, without reloading the page.
function openStream(query, onView) {
  closeStream();
  const ctl = new AbortController();
  state.stream = ctl;
  let lastID = "";
  (async () => {
    let backoff = 1000;
    while (!ctl.signal.aborted) {
      let wait = backoff;
      try {
        const h = headers(lastID ? { "Last-Event-ID": lastID } : {});
        const res = await fetch("/page/events?" + query, { headers: h, signal: ctl.signal, cache: "no-store" });
        if (res.status === 401 || res.status === 403) { showLogin(res.status); return; }
        if (res.status === 404) { onView(null); return; }
        if (!res.ok) {
          const ra = parseFloat(res.headers.get("Retry-After"));
          if (ra > 0) wait = ra * 1000;
          setLive("waiting", res.status === 503 ? "server busy, retrying" : "error " + res.status);
        } else {
          setLive("live", "live");
          const reader = res.body.getReader();
          const dec = new TextDecoder();
          let buf = "";
          for (;;) {
            const { value, done } = await reader.read();
            if (done) break;
            buf += dec.decode(value, { stream: true });
            let i;
            while ((i = buf.indexOf("\n\n")) >= 0) {
              const block = buf.slice(0, i);
              buf = buf.slice(i + 2);
              state.lastEvent = Date.now(); // events and heartbeats alike
              let ev = "message", data = "";
              for (const line of block.split("\n")) {
                if (line.startsWith("event:")) ev = line.slice(6).trim();
                else if (line.startsWith("data:")) data += line.slice(5).trim();
                else if (line.startsWith("id:")) lastID = line.slice(3).trim();
              }
              if (ev === "view" && data) {
                backoff = 1000;
                document.body.dataset.events = String(++state.events);
                onView(JSON.parse(data));
              } else if (ev === "gone") {
                onView(null);
                return;
              }
            }
          }
        }
      } catch (e) {
        if (ctl.signal.aborted) return;
      }
      if (ctl.signal.aborted) return;
      setLive("reconnecting", "reconnecting…");
      await sleep(wait, ctl.signal);
      backoff = Math.min(backoff * 2, 10000);
    }
  })();
}

// ---- login ----------------------------------------------------------------

function showLogin(status) {
  closeStream();
  setLive("waiting", "not signed in");
  $("view").innerHTML = `<form class="login" id="login">
    <h1>Token needed</h1>
    <p>${status === 403 ? "The token given may not read the status page." : "This service asks for a bearer token with read permission (write permission for the actions)."}</p>
    <label for="token">Token</label>
    <input id="token" type="password" autocomplete="off" required>
    <button class="primary" id="login-go">Open the status page</button>
    <p class="muted">The token is kept in this browser tab only (session storage).</p>
  </form>`;
  $("login").addEventListener("submit", (e) => {
    e.preventDefault();
    state.token = $("token").value.trim();
    sessionStorage.setItem("modewatch-token", state.token);
    start();
  });
}

// ---- small SVG helpers ----------------------------------------------------

// spark draws a ratio trend (value/limit) with the limit at ratio 1.
function spark(tr, key, w = 160, h = 32) {
  if (!tr) return "";
  const s = tr[key];
  const n = s.value.length;
  const r = s.value.map((v, i) => (v != null && s.limit[i] ? v / s.limit[i] : null));
  // The limit sits at a third of the height or higher; larger values are
  // clipped to the top and marked.
  const top = Math.min(3, Math.max(1.5, ...r.filter((x) => x != null)));
  const X = (i) => (n <= 1 ? 0 : (i * w) / (n - 1));
  const Y = (x) => h - 2 - (Math.min(x, top) / top) * (h - 4);
  let d = "", pen = false, over = "";
  r.forEach((x, i) => {
    if (x == null) { pen = false; return; }
    d += (pen ? "L" : "M") + X(i).toFixed(1) + " " + Y(x).toFixed(1);
    pen = true;
    if (x > 1) over += `<rect class="spark-over" x="${(X(i) - 1.5).toFixed(1)}" y="${(Y(x) - 1.5).toFixed(1)}" width="3" height="3"/>`;
  });
  return `<svg viewBox="0 0 ${w} ${h}" preserveAspectRatio="none" aria-hidden="true"><line class="spark-lim" x1="0" x2="${w}" y1="${Y(1)}" y2="${Y(1)}"/><path class="spark" d="${d}"/>${over}</svg>`;
}

// ---- plant view -----------------------------------------------------------

function statCell(u, key, label) {
  const r = u.ratio ? u.ratio[key] : null;
  const over = r != null && r > 1;
  return `<div class="stat" data-k="${label}"><span class="lbl">${label}</span><span class="val${over ? " over" : ""}" title="value / control limit">${r == null ? "—" : fmt(r) + "×"}</span>${spark(u.trend, key)}</div>`;
}

function qualityCell(u) {
  const q = u.incidents.filter((i) => i.group === "quality").map((i) =>
    `<span class="sev sev-quality">${esc(i.severity)}</span> ${esc(i.statistic)}: ${esc(i.top.map((c) => short(u.name, c)).join(", "))}${i.acked ? ` <span class="tag">ack</span>` : ""}`);
  if (u.error) q.push(`<span class="q">model error: ${esc(u.error)}</span>`);
  const list = (n, what) => n.count ? q.push(`<span class="q" title="${esc(n.names.join(", "))}${n.count > n.names.length ? ", …" : ""}">${n.count} ${what}</span>`) : 0;
  list(u.missing, "missing");
  list(u.excluded, "excluded");
  list(u.warming, "warming up");
  list(u.not_modelled, "not modelled");
  if (u.step_errors) q.push(`<span class="q">${u.step_errors} step errors</span>`);
  return q.length ? `<div class="quality">${q.join("<br>")}</div>` : `<div class="ok">data ok</div>`;
}

function renderPlant(p) {
  if (!p) return;
  $("clock").textContent = p.time && !p.time.startsWith("0001") ? "plant time " + when(p.time) : "no frames yet";
  const abnormal = p.units.filter((u) => u.incidents.length || Object.values(u.ratio || {}).some((r) => r != null && r > 1));
  let html = `<h1>Plant</h1><p class="summary"><span><b>${p.units.length}</b> units</span>
    <span><b>${abnormal.length}</b> abnormal</span><span><b>${p.open}</b> open incidents</span>
    <span class="muted">ratios are statistic ÷ control limit; trends show the last 4 h, dashed line = limit</span></p>`;
  html += `<div class="units" id="units"><div class="urow head"><span>Status</span><span>Unit</span><span>T²</span><span>SPE</span><span>φ</span><span>Open incidents</span><span>Data quality</span></div>`;
  for (const u of p.units) {
    const proc = u.incidents.filter((i) => i.group !== "quality");
    const worst = proc.reduce((a, b) => (sevRank(b.severity) > sevRank(a) ? b.severity : a), "");
    const abn = u.incidents.length > 0;
    const overAny = Object.values(u.ratio || {}).some((r) => r != null && r > 1);
    let status = `<span class="normal-badge">normal</span>`;
    if (proc.length) status = `<span class="sev ${sevClass(worst)}">${esc(worst)}</span>`;
    else if (overAny) status = `<span class="sev sev-other">over limit</span>`;
    else if (abn) status = `<span class="sev sev-quality">data quality</span>`;
    if (u.maintenance) status += ` <span class="tag">maintenance</span>`;
    const st = [u.model_state, u.operating_state ? "state " + u.operating_state : ""].filter(Boolean).map(esc).join(" · ");
    const incs = u.incidents.filter((i) => i.group !== "quality").map((i) => `<span${i.what ? ` title="${esc(i.what)}"` : ""}>${i.group === "quality" ? `<span class="sev sev-quality">${esc(i.severity)}</span>` : `<span class="sev ${sevClass(i.severity)}">${esc(i.severity)}</span>`}
       ${i.acked ? `<span class="tag">ack</span>` : ""}${i.shelved ? `<span class="tag">shelved</span>` : ""} ${esc(i.top.map((c) => short(u.name, c)).join(", "))} <span class="muted">${fmt(i.ratio, 1)}×</span></span>`).join("");
    html += `<div class="urow${abn || overAny ? " abn" : ""}" data-unit="${esc(u.name)}" style="--sev-col:${proc.length ? sevColour(worst) : abn && !overAny ? "var(--quality)" : "var(--ink)"}">
      <div class="ustatus">${status}</div>
      <div><div class="uname"><a href="#/unit/${encodeURIComponent(u.name)}">${esc(u.name)}</a></div><div class="ustate">${st} · ${u.channels} ch</div></div>
      ${statCell(u, "t2", "T²")}${statCell(u, "spe", "SPE")}${statCell(u, "phi", "φ")}
      <div class="incs">${incs || `<span class="ok">none</span>`}</div>
      ${qualityCell(u)}</div>`;
  }
  html += `</div>`;
  $("view").innerHTML = html;
  if (!performance.getEntriesByName("modewatch-first-view").length) performance.mark("modewatch-first-view");
}

function sevRank(name) {
  const s = (state.me && state.me.severities) || ["low", "medium", "high"];
  return s.indexOf(name) + 1;
}

// ---- unit view -------------------------------------------------------------

function chart(tr, key, label, spans) {
  // Drawn at the width it is shown at, so that the labels keep their size.
  const W = Math.max(320, Math.min(1200, ($("view").clientWidth || 1000) - 40)), H = 150, L = 52, R = 8, T = 8, B = 20;
  const s = tr[key];
  const n = s.value.length;
  const vals = s.value.filter((v) => v != null), lims = s.limit.filter((v) => v != null);
  if (!vals.length) return `<div class="chart"><h3><span>${label}</span><span class="muted">no scores in this window</span></h3></div>`;
  if (!lims.length) return `<div class="chart"><h3><span>${label}</span><span class="muted">no control limit for this unit (statistic not scored)</span></h3></div>`;
  const lim = lims.length ? Math.max(...lims) : 1;
  const top = Math.max(lim * 1.6, Math.min(Math.max(...vals), lim * 8)) * 1.05;
  const t0 = Date.parse(tr.start), step = tr.step_s * 1000, t1 = t0 + n * step;
  const X = (t) => L + ((t - t0) / (t1 - t0)) * (W - L - R);
  const Y = (v) => T + (1 - Math.min(v, top) / top) * (H - T - B);
  const path = (arr) => { let d = "", pen = false; arr.forEach((v, i) => { if (v == null) { pen = false; return; } d += (pen ? "L" : "M") + X(t0 + (i + 0.5) * step).toFixed(1) + " " + Y(v).toFixed(1); pen = true; }); return d; };
  let sh = "";
  for (const sp of spans) {
    const a = Math.max(t0, Date.parse(sp.start)), b = Math.min(t1, sp.end ? Date.parse(sp.end) : t1);
    if (b > a) sh += `<rect class="span" x="${X(a).toFixed(1)}" y="${T}" width="${Math.max(2, X(b) - X(a)).toFixed(1)}" height="${H - T - B}"><title>incident ${esc(sp.id)}</title></rect>`;
  }
  let over = "";
  s.value.forEach((v, i) => { if (v != null && s.limit[i] && v > s.limit[i]) over += `<rect class="over" x="${(X(t0 + (i + 0.5) * step) - 2).toFixed(1)}" y="${(Y(v) - 2).toFixed(1)}" width="4" height="4"/>`; });
  const ticks = [0, top / 2, top].map((v) => `<line class="grid" x1="${L}" x2="${W - R}" y1="${Y(v)}" y2="${Y(v)}"/><text class="axis" x="${L - 4}" y="${Y(v) + 3}" text-anchor="end">${fmt(v, 1)}</text>`).join("");
  const tl = [t0, (t0 + t1) / 2, t1].map((t, i) => `<text class="axis" x="${X(t)}" y="${H - 4}" text-anchor="${["start", "middle", "end"][i]}">${new Date(t).toISOString().slice(11, 16)}</text>`).join("");
  const cur = [...s.value].reverse().find((v) => v != null), curLim = [...s.limit].reverse().find((v) => v != null);
  const isOver = cur != null && curLim && cur > curLim;
  return `<div class="chart" data-stat="${key}"><h3><span>${label}</span><span class="${isOver ? "error" : "muted"}">${isOver ? "▲ over limit · " : ""}last ${fmt(cur)} / limit ${fmt(curLim)}</span></h3>
    <svg viewBox="0 0 ${W} ${H}" role="img" aria-label="${label} against its limit">${ticks}${sh}
    <path class="lim" d="${path(s.limit)}"/><path class="val" d="${path(s.value)}"/>${over}${tl}</svg></div>`;
}

function bandCov(r) {
  const c = (r.contributors || []).find((x) => x.band_coverage);
  return c ? ` (${Math.round(100 * c.band_coverage)} %)` : "";
}

function bandCell(c) {
  const rd = c.reading ?? c.value, ex = c.expected;
  let lo = c.band_low, hi = c.band_high;
  if (lo == null && ex != null && c.band != null) { lo = ex - c.band; hi = ex + c.band; }
  if (rd == null && ex == null) return `<td class="muted" colspan="4">not carried by this record</td>`;
  let bar = "";
  if (rd != null && lo != null && hi != null) {
    const a = Math.min(lo, rd), b = Math.max(hi, rd), pad = (b - a) * 0.1 || 1, A = a - pad, Bn = b + pad;
    const P = (x) => (100 * (x - A)) / (Bn - A);
    const out = rd < lo || rd > hi;
    bar = `<div class="band" title="band ${fmt(lo)} … ${fmt(hi)}"><span class="in" style="left:${P(lo)}%;width:${P(hi) - P(lo)}%"></span><span class="exp" style="left:${P(ex)}%"></span><span class="rd${out ? " out" : ""}" style="left:${P(rd)}%"></span></div>${out ? `<span class="error">▲ outside band</span>` : ""}`;
  }
  return `<td class="num" data-k="reading">${fmt(rd, 3)}</td><td class="num" data-k="expected">${fmt(ex, 3)}</td><td class="num" data-k="band">${lo != null ? fmt(lo, 3) + " … " + fmt(hi, 3) : "—"}</td><td>${bar}</td>`;
}

function renderUnit(d) {
  if (!d) { setLive("waiting", "no such unit"); $("view").innerHTML = `<p class="error">No such unit.</p><p><a href="#/">Back to the plant</a></p>`; return; }
  const u = d.unit;
  $("clock").textContent = u.latest ? "plant time " + when(u.latest.time) : "no frames yet";
  const spans = [...d.records, ...d.open].filter((r) => r.group !== "quality");
  const st = [u.model_state, u.state ? "operating state " + u.state : ""].filter(Boolean).map(esc).join(" · ");
  let html = `<h1><a href="#/">Plant</a> › ${esc(u.name)}</h1>
    <p class="summary"><span>${st}</span><span><b>${u.channels.length}</b> channels</span><span><b>${u.frames}</b> frames</span>
    ${u.maintenance ? `<span class="tag">maintenance</span>` : ""}<span>${u.latest ? "latest frame " + when(u.latest.time) : "no frame yet"}</span>
    ${can("maintenance") ? `<button data-act="maintenance" data-unit="${esc(u.name)}">${u.maintenance ? "End maintenance…" : "Maintenance…"}</button>` : ""}</p>
    <div class="windows" role="group" aria-label="window">${[["1h", "last hour"], ["8h", "shift (8 h)"], ["24h", "day"]].map(([w, t]) => `<button data-win="${w}" class="${state.window === w ? "on" : ""}">${t}</button>`).join("")}</div>
    <div class="charts">${chart(d.trend, "t2", "T²", spans)}${chart(d.trend, "spe", "SPE", spans)}${chart(d.trend, "phi", "φ", spans)}</div>
    <p class="muted">Solid line: statistic (largest value/limit in each point); dashed: control limit; shaded: incidents; ▪ points over the limit.</p>`;
  for (const r of d.open) {
    html += `<h2>Open incident ${sevBadge(r)} <span class="muted">${esc(r.id)} since ${when(r.start)}, peak ${esc(r.peak.statistic)} ${fmt(r.peak.ratio, 1)}× limit</span></h2>`;
    if (r.location && r.location.length) html += `<p>Location: <b>${esc(r.location.map((c) => short(u.name, c)).join(", "))}</b></p>`;
    if (r.quality) { const w = what(r); html += `<p class="quality">${esc(r.quality.kind)} on ${esc(short(u.name, r.quality.channel))}${w ? `: <span class="what">${esc(w)}</span>` : ""}</p>`; continue; }
    html += `<table class="wide contributors"><thead><tr><th>#</th><th>Sensor</th><th class="num">Share</th><th class="num">RBC / limit</th><th>Modes</th><th class="num">Reading</th><th class="num">Expected</th><th class="num">Band${bandCov(r)}</th><th></th></tr></thead><tbody>`;
    for (const c of r.contributors) {
      html += `<tr><td data-k="#">${c.rank}</td><td data-k="sensor"><b title="${esc(c.channel)}">${esc(short(u.name, c.channel))}</b></td><td class="num" data-k="share">${pct(c.share)}</td><td class="num" data-k="RBC/limit">${c.rbc_limit ? fmt(c.rbc / c.rbc_limit) : "—"}</td><td data-k="modes">${(c.modes || []).map((m) => "M" + m).join(" ")}</td>${bandCell(c)}</tr>`;
    }
    html += `</tbody></table>`;
  }
  const lat = u.latest;
  if (lat && (lat.missing.length || lat.excluded.length || lat.warming.length)) {
    html += `<h2>Data quality</h2><p class="quality">${lat.missing.length ? "missing: " + esc(lat.missing.join(", ")) + "<br>" : ""}${lat.excluded.length ? "excluded: " + esc(lat.excluded.join(", ")) + "<br>" : ""}${lat.warming.length ? "warming up: " + esc(lat.warming.join(", ")) : ""}</p>`;
  }
  if (u.states && u.states.length) {
    html += `<h2>Operating states</h2><p class="summary">` + u.states.map((x) => `<span>${x.current ? "<b>▶ " + esc(x.label) + "</b>" : esc(x.label)} <span class="muted">${x.frames} frames · ${esc(x.model_state)}${x.fitted ? "" : " · learned online"}</span></span>`).join("") + `</p>`;
  }
  html += `<h2>Modes (${(u.modes || []).length}) <span class="muted">loadings per sensor, share of variance</span></h2><div class="modes">`;
  for (const m of [...(u.modes || [])].sort((a, b) => b.variance_share - a.variance_share)) {
    const mx = Math.max(...m.loadings.map(Math.abs), 1e-9);
    html += `<div class="mode"><h3>M${m.id} <span class="muted">${pct(m.variance_share)} of variance</span></h3>` + m.channels.map((ch, i) => {
      const l = m.loadings[i], w = (50 * Math.abs(l)) / mx;
      return `<div class="load"><span class="ch" title="${esc(ch)}">${esc(short(u.name, ch))}</span><span class="bar2"><i style="left:${l >= 0 ? 50 : 50 - w}%;width:${w}%"></i></span><span class="num">${l.toFixed(2)}</span></div>`;
    }).join("") + `</div>`;
  }
  html += `</div><h2>Recent incidents</h2>` + incidentTable(d.records.slice(0, 20), false);
  $("view").innerHTML = html;
  for (const b of document.querySelectorAll("[data-win]")) b.addEventListener("click", () => { state.window = b.dataset.win; route(); });
  for (const b of document.querySelectorAll("[data-act]")) b.addEventListener("click", () => act(b.dataset.act, b.dataset.id, b.dataset.unit));
}

// ---- incidents view --------------------------------------------------------

function can(op) {
  return !!(state.me && state.me.identity.can_write && state.me.ops.includes(op));
}

function whoDid(r) {
  const w = [];
  if (r.acknowledged) w.push(`acknowledged by <b>${esc(r.acknowledged.by)}</b> ${when(r.acknowledged.at)}${r.acknowledged.comment ? " — " + esc(r.acknowledged.comment) : ""}`);
  if (r.shelved) w.push(`shelved by <b>${esc(r.shelved.by)}</b> until ${when(r.shelved.until)}${r.shelved.reason ? " — " + esc(r.shelved.reason) : ""}`);
  if (r.accepted) w.push(`accepted as normal by <b>${esc(r.accepted.by)}</b> ${when(r.accepted.at)}${r.accepted.comment ? " — " + esc(r.accepted.comment) : ""}`);
  if (r.end_reason) w.push("ended: " + esc(r.end_reason));
  return w.join("<br>");
}

function actionButtons(r) {
  if (r.end || r.kind === "flood") return "";
  const b = [];
  if (can("ack") && !r.acknowledged) b.push(`<button data-act="ack" data-id="${esc(r.id)}">Acknowledge</button>`);
  if (can("shelve") && !r.shelved) b.push(`<button data-act="shelve" data-id="${esc(r.id)}">Shelve…</button>`);
  if (can("unshelve") && r.shelved) b.push(`<button data-act="unshelve" data-id="${esc(r.id)}">Unshelve</button>`);
  if (can("maintenance")) b.push(`<button data-act="maintenance" data-id="${esc(r.id)}" data-unit="${esc(r.unit)}">Maintenance…</button>`);
  if (can("accept") && r.group === "model" && !r.accepted) b.push(`<button data-act="accept" data-id="${esc(r.id)}" data-unit="${esc(r.unit)}">Accept as normal…</button>`);
  return b.length ? `<div class="actions">${b.join("")}</div>` : `<span class="muted">view only</span>`;
}

// what says in the channel's own terms what a record found, with the
// digits the alert records' text uses (alerts.RecordContributor's
// Expectation, RecordQuality's Describe): "pump02.flow reads 71.2,
// expected 64.0 ± 1.1" for the first contributor, or a level shift's
// means before and after; "" when the record carries neither.
function what(r) {
  const dig = (s) => (s > 0 && isFinite(s) ? Math.min(Math.max(1 - Math.floor(Math.log10(s)), 0), 6) : 2);
  if (r.quality) {
    const l = r.quality.level;
    if (!l || l.before == null || l.after == null || l.unexplained == null) return "";
    const d = dig(Math.abs(l.unexplained));
    return `${l.before.toFixed(d)} → ${l.after.toFixed(d)}, ${l.unexplained.toFixed(d)} not explained by the other channels`;
  }
  const c = (r.contributors || [])[0];
  if (!c || c.reading == null) return "";
  if (c.expected == null || c.band == null) return `${c.channel} reads ${c.reading.toFixed(2)}`;
  const d = dig(c.band);
  return `${c.channel} reads ${c.reading.toFixed(d)}, expected ${c.expected.toFixed(d)} ± ${c.band.toFixed(d)}`;
}

function incidentTable(recs, withActions) {
  if (!recs.length) return `<p class="muted">None.</p>`;
  let h = `<table class="wide incidents"><thead><tr><th>Severity</th><th>Unit</th><th>Started</th><th>State</th><th class="num">Peak</th><th>Top sensors</th><th>Who did what</th>${withActions ? "<th>Actions</th>" : ""}</tr></thead><tbody>`;
  for (const r of recs) {
    const top = r.kind === "notice" ? esc(r.notice) : r.quality ? `${esc(r.quality.kind)}: ${esc(r.quality.channel || r.unit)}` : (r.contributors || []).slice(0, 3).map((c) => esc(c.channel)).join(", ");
    h += `<tr data-id="${esc(r.id)}" data-state="${esc(r.end ? "closed" : r.acknowledged ? "acknowledged" : "open")}"><td data-k="severity">${sevBadge(r)}</td><td data-k="unit"><a href="#/unit/${encodeURIComponent(r.unit)}">${esc(r.unit)}</a></td>
      <td data-k="started">${when(r.start)}${r.end ? "<br><span class='muted'>ended " + when(r.end) + "</span>" : ""}</td>
      <td data-k="state">${esc(r.end ? "closed" : r.state)}${r.acknowledged ? ` <span class="tag">ack</span>` : ""}${r.shelved ? ` <span class="tag">shelved</span>` : ""}</td>
      <td class="num" data-k="peak">${r.kind === "notice" ? "—" : esc(r.peak.statistic) + " " + fmt(r.peak.ratio, 1) + "×"}</td><td data-k="top">${top}${r.kind !== "notice" && what(r) ? `<br><span class="muted what">${esc(what(r))}</span>` : ""}</td><td class="who-did" data-k="who">${whoDid(r) || "—"}</td>
      ${withActions ? `<td data-k="actions">${actionButtons(r)}</td>` : ""}</tr>`;
  }
  return h + `</tbody></table>`;
}

function renderIncidents(d) {
  if (!d) return;
  state.view = d;
  $("clock").textContent = d.time && !d.time.startsWith("0001") ? "plant time " + when(d.time) : "no frames yet";
  const f = state.filters;
  const sevs = (state.me && state.me.severities) || [];
  // The filter bar is drawn once per list of units, so that an update does
  // not close a list the user has open; the tables are redrawn.
  const key = JSON.stringify(d.units);
  if (!$("inc-tables") || $("view").dataset.units !== key) {
    $("view").dataset.units = key;
    $("view").innerHTML = `<h1>Incidents</h1><div class="filters">
    <label>Unit <select id="f-unit"><option value="">all</option>${d.units.map((u) => `<option ${u === f.unit ? "selected" : ""}>${esc(u)}</option>`).join("")}</select></label>
    <label>Severity <select id="f-sev"><option value="">all</option>${sevs.map((s) => `<option ${s === f.severity ? "selected" : ""}>${esc(s)}</option>`).join("")}</select></label>
    <label><input type="checkbox" id="f-closed" ${f.closed ? "checked" : ""}> show closed</label>
    ${state.me && !state.me.identity.can_write ? `<span class="tag">read only: actions need a token with write permission</span>` : ""}</div>
    <div id="inc-tables"></div>`;
    $("f-unit").addEventListener("change", (e) => { f.unit = e.target.value; renderIncidents(state.view); });
    $("f-sev").addEventListener("change", (e) => { f.severity = e.target.value; renderIncidents(state.view); });
    $("f-closed").addEventListener("change", (e) => { f.closed = e.target.checked; renderIncidents(state.view); });
  }
  const keep = (r) => (!f.unit || r.unit === f.unit) && (!f.severity || r.severity === f.severity);
  const open = d.open.filter(keep), recent = d.recent.filter(keep);
  let html = `<h2>Open (${open.length})</h2>${incidentTable(open, true)}`;
  if (f.closed) html += `<h2>Recent, closed (${recent.length})</h2>${incidentTable(recent, false)}`;
  $("inc-tables").innerHTML = html;
  for (const b of document.querySelectorAll("[data-act]")) b.addEventListener("click", () => act(b.dataset.act, b.dataset.id, b.dataset.unit));
}

// ---- actions: each asks for confirmation, then calls /api --------------------

function byName() {
  if (state.me && state.me.identity.auth && state.me.identity.name) return state.me.identity.name;
  return localStorage.getItem("modewatch-by") || "";
}

function act(op, id, unit) {
  const r = state.view && [...state.view.open].find((x) => x.id === id);
  const nameField = state.me && state.me.identity.auth && state.me.identity.name ? "" :
    `<label>Your name (recorded as who did it)<input name="by" required maxlength="100" value="${esc(byName())}"></label>`;
  const titles = { ack: "Acknowledge", shelve: "Shelve", unshelve: "Unshelve", maintenance: "Maintenance", accept: "Accept as normal" };
  const text = {
    ack: `Acknowledge incident ${id} on ${r ? r.unit : ""}? The alarm stays visible until it clears.`,
    shelve: `Shelve incident ${id}: its alarm group is hidden until the shelf ends. Give how long and why.`,
    unshelve: `End the shelf of incident ${id} now?`,
    maintenance: `Put unit ${unit} in maintenance: its alarms are silenced until maintenance is switched off. Every open incident of the unit ends.`,
    accept: `Accept what incident ${id} shows on unit ${unit} as the unit's new normal: the model learns it from now on and the incident ends. Only do this when the change is known and intended.`,
  }[op];
  const fields = {
    ack: `<label>Comment (optional)<input name="comment" maxlength="500"></label>`,
    shelve: `<label>For <select name="for"><option>30m</option><option selected>1h</option><option>2h</option><option>4h</option><option>8h</option><option>12h</option></select></label><label>Reason<input name="reason" required maxlength="500"></label>`,
    unshelve: ``,
    maintenance: `<label>Maintenance <select name="on"><option value="true">on</option><option value="false">off</option></select></label><label>Reason<input name="reason" required maxlength="500"></label>`,
    accept: `<label>Reason<input name="reason" required maxlength="500"></label>`,
  }[op];
  $("confirm-title").textContent = titles[op];
  $("confirm-text").textContent = text;
  $("confirm-fields").innerHTML = nameField + fields;
  $("confirm-error").textContent = "";
  const dlg = $("confirm");
  const form = $("confirm-form");
  form.onsubmit = async (e) => {
    if (e.submitter && e.submitter.value === "cancel") return;
    e.preventDefault();
    const fd = new FormData(form);
    const body = { by: fd.get("by") || byName() };
    if (fd.get("by")) localStorage.setItem("modewatch-by", fd.get("by"));
    let url = "/api/alerts/" + op;
    if (op === "maintenance") { url = "/api/units/" + encodeURIComponent(unit) + "/maintenance"; body.on = fd.get("on") === "true"; body.reason = fd.get("reason"); }
    else if (op === "accept") { url = "/api/alerts/accept"; Object.assign(body, { alert_id: id, comment: fd.get("reason") }); }
    else {
      body.alert_id = id;
      if (op === "shelve") { body.for = fd.get("for"); body.reason = fd.get("reason"); }
      if (op === "ack" && fd.get("comment")) body.comment = fd.get("comment");
    }
    try {
      const res = await fetch(url, { method: "POST", headers: headers({ "Content-Type": "application/json" }), body: JSON.stringify(body) });
      const rep = await res.json().catch(() => ({}));
      if (!res.ok || rep.ok === false) { $("confirm-error").textContent = `${res.status}: ${rep.error || rep.message || "refused"}`; return; }
      dlg.close();
    } catch (err) {
      $("confirm-error").textContent = String(err);
    }
  };
  dlg.showModal();
}

// ---- routing ----------------------------------------------------------------

function route() {
  const h = location.hash || "#/";
  delete $("view").dataset.units;
  for (const a of document.querySelectorAll(".bar nav a")) a.classList.toggle("on", h === a.getAttribute("href") || (a.id === "nav-plant" && h.startsWith("#/unit/")));
  const m = h.match(/^#\/unit\/(.+)$/);
  if (m) {
    const unit = decodeURIComponent(m[1]);
    state.route = "unit";
    openStream("view=unit&unit=" + encodeURIComponent(unit) + "&window=" + state.window, renderUnit);
  } else if (h === "#/incidents") {
    state.route = "incidents";
    openStream("view=incidents", renderIncidents);
  } else {
    state.route = "plant";
    openStream("view=plant", renderPlant);
  }
}

async function start() {
  try {
    state.me = await getJSON("/page/me");
  } catch (e) {
    if (e instanceof AuthError) { showLogin(e.message.includes("may not") ? 403 : 401); return; }
    setLive("reconnecting", "service unreachable, retrying");
    setTimeout(start, 3000);
    return;
  }
  const id = state.me.identity;
  $("who").textContent = id.auth ? `${id.name || "token"} · ${id.can_write ? "read and write" : "read only"}` : (id.can_write ? "open access" : "read only");
  route();
}

window.addEventListener("hashchange", route);
// A stream silent for longer than two heartbeats is treated as lost.
setInterval(() => {
  if (state.stream && state.lastEvent && Date.now() - state.lastEvent > 40000 && $("live").dataset.state === "live") setLive("reconnecting", "no update for 40 s");
}, 5000);
start();
