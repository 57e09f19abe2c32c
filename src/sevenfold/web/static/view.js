// sevenfold view: the queue, one job and one batch, polled from the JSON under /api.
// Plain script, no dependencies: the plots are SVG drawn by plot() below. Everything the
// page keeps is bounded (table rows replaced wholesale, plot points thinned past MAX_POINTS).
"use strict";
(function () {
  const TOKEN = new URLSearchParams(location.search).get("token") || "";
  const MAX_POINTS = 2000;
  const PAGE_ROWS = 200;
  const body = document.body;
  const main = document.getElementById("main");
  const STATES = ["queued", "running", "done", "failed", "cancelled"];

  // ------------------------------------------------------------------ helpers
  function esc(s) {
    return String(s === null || s === undefined ? "" : s).replace(/[&<>"']/g,
      (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;" }[c]));
  }
  function link(path) {
    if (!TOKEN) return path;
    return path + (path.indexOf("?") >= 0 ? "&" : "?") + "token=" + encodeURIComponent(TOKEN);
  }
  function num(v, digits) {
    if (v === null || v === undefined || v === "") return "";
    if (typeof v !== "number") return String(v);
    if (!isFinite(v)) return String(v);
    if (Number.isInteger(v) && Math.abs(v) < 1e9) return String(v);
    const a = Math.abs(v);
    if (a !== 0 && (a < 1e-3 || a >= 1e6)) return v.toExponential(digits || 3);
    return v.toPrecision(digits ? digits + 1 : 6).replace(/\.?0+$/, "");
  }
  function sci(v) { return v === null || v === undefined ? "" : Number(v).toExponential(2); }
  function badge(state, extra) {
    return `<span class="state state-${esc(state)}">${esc(state)}${extra ? " " + esc(extra) : ""}</span>`;
  }
  function setStatus(text, bad) {
    const el = document.getElementById("status");
    el.textContent = text;
    el.className = bad ? "bad" : "";
  }
  function say(text, bad) {
    let el = document.getElementById("message");
    if (!el) return;
    el.textContent = text;
    el.className = bad ? "message bad" : "message";
  }

  async function getJSON(url) {
    const resp = await fetch(url, { cache: "no-store" });
    let data = null;
    try { data = await resp.json(); } catch (e) { data = null; }
    if (!resp.ok) {
      const err = new Error((data && data.error) || `${resp.status} ${resp.statusText}`);
      err.status = resp.status;
      throw err;
    }
    return data;
  }

  async function act(id, action) {
    const resp = await fetch(`/api/jobs/${id}/${action}`, {
      method: "POST", headers: { "X-Sevenfold-Token": TOKEN }, cache: "no-store",
    });
    let data = {};
    try { data = await resp.json(); } catch (e) { data = {}; }
    if (!resp.ok) throw new Error(data.error || `${resp.status} ${resp.statusText}`);
    return data;
  }

  // Calls fn every `interval` ms (one call at a time), slower while the tab is hidden and
  // after errors (up to 15 s), so a page left open overnight neither floods nor gives up.
  function poller(fn, interval) {
    let delay = interval, timer = null, busy = false, again = false, outage = false;
    async function tick() {
      clearTimeout(timer);
      if (busy) { again = true; return; }
      busy = true;
      try {
        await fn();
        setStatus("live · " + new Date().toLocaleTimeString());
        if (outage) { say(""); outage = false; }
        delay = interval;
      } catch (e) {
        setStatus((e.status === 503 ? "" : "connection: ") + e.message + " · retrying", true);
        if (e.status === 503) { say(e.message + " (this page keeps looking)", true); outage = true; }
        delay = Math.min(Math.max(delay * 2, 2000), 15000);
      }
      busy = false;
      if (again) { again = false; return tick(); }
      timer = setTimeout(tick, document.hidden ? Math.max(delay, 5000) : delay);
    }
    tick();
    return { now: tick };
  }

  // A button that asks once more before acting ("sure?"), for 4 s.
  function armed(button) {
    if (button.dataset.armed === "1") return true;
    button.dataset.armed = "1";
    const label = button.textContent;
    button.textContent = label + "? click again";
    setTimeout(() => { button.dataset.armed = ""; button.textContent = label; }, 4000);
    return false;
  }
  function actionButtons(job) {
    if (!TOKEN) return "";
    if (job.state === "queued" || job.state === "running") {
      if (job.cancel_requested) return `<span class="muted">stopping</span>`;
      return `<button class="act cancel" data-id="${job.id}" data-action="cancel">cancel</button>`;
    }
    if (job.state === "failed" || job.state === "cancelled")
      return `<button class="act retry" data-id="${job.id}" data-action="retry">retry</button>`;
    return "";
  }
  function onActions(root, after) {
    root.addEventListener("click", async (ev) => {
      const b = ev.target.closest("button.act");
      if (!b || b.disabled) return;
      if (!armed(b)) return;
      b.disabled = true;
      try {
        const r = await act(b.dataset.id, b.dataset.action);
        say(`job ${r.id}: ${r.result}`);
      } catch (e) {
        say(e.message, true);
      }
      after();
    });
  }

  // ------------------------------------------------------------------ SVG plot
  // series: [{name, points: [[x, y], ...]}]; opt: {logY, xLabel, yLabel, hline, xCategories, markers}
  const COLORS = ["#1f6fb4", "#d9480f", "#2b8a3e", "#862e9c", "#c92a2a", "#5c940d", "#0b7285", "#e67700"];
  function niceTicks(lo, hi, n) {
    if (!(hi > lo)) { hi = lo + (Math.abs(lo) || 1); lo = lo - (Math.abs(lo) || 1) * 0; }
    const raw = (hi - lo) / n, mag = Math.pow(10, Math.floor(Math.log10(raw)));
    const step = [1, 2, 5, 10].map((m) => m * mag).find((s) => s >= raw) || 10 * mag;
    const ticks = [];
    const first = Math.floor(lo / step + 1e-9) * step, last = Math.ceil(hi / step - 1e-9) * step;
    for (let t = first; t <= last + step * 1e-9; t += step) ticks.push(+t.toPrecision(12));
    return ticks;
  }
  function plot(svg, series, opt) {
    const W = 640, H = 300, L = 72, R = 16, B = 42;
    // a legend (several series) goes in rows above the frame: it never hides a point
    const legend = [];
    if (series.length > 1) {
      let x = L, row = 0;
      series.forEach((s, i) => {
        const w = 22 + 6.4 * String(s.name).length;
        if (x + w > W - R && x > L) { x = L; row += 1; }
        legend.push({ x, row, i, name: s.name });
        x += w;
      });
    }
    const T = 14 + (legend.length ? 15 * (legend[legend.length - 1].row + 1) : 0);
    const ty = (y) => (opt.logY ? Math.log10(y) : y);
    const pts = [];
    series.forEach((s) => s.points.forEach((p) => {
      if (p[1] === null || p[1] === undefined || !isFinite(p[1]) || (opt.logY && !(p[1] > 0))) return;
      pts.push(p);
    }));
    if (!pts.length) {
      svg.innerHTML = `<text x="${W / 2}" y="${H / 2}" text-anchor="middle" class="empty">${esc(opt.empty || "no data yet")}</text>`;
      return;
    }
    let x0 = Math.min(...pts.map((p) => p[0])), x1 = Math.max(...pts.map((p) => p[0]));
    let y0 = Math.min(...pts.map((p) => ty(p[1]))), y1 = Math.max(...pts.map((p) => ty(p[1])));
    // a target line (rtol) widens the axis only when it is near the data: a solve far from
    // its target keeps a readable plot and the label says where the target is
    let hline = opt.hline, hlabel = opt.hlineLabel || "";
    if (hline !== undefined && hline !== null && opt.logY && hline > 0 && ty(hline) < y0 - 4) {
      hlabel += " (below the plot)"; hline = null;
    }
    const hasLine = hline !== undefined && hline !== null && (!opt.logY || hline > 0);
    if (hasLine) { y0 = Math.min(y0, ty(hline)); y1 = Math.max(y1, ty(hline)); }
    let yt;
    if (opt.logY) {
      y0 = Math.floor(y0); y1 = Math.ceil(y1); if (y1 === y0) y1 += 1;
      const every = Math.max(1, Math.ceil((y1 - y0) / 8));
      yt = []; for (let d = y0; d <= y1; d += every) yt.push(d);
    } else {
      if (y1 === y0) { const pad = Math.abs(y0) * 0.05 || 1; y0 -= pad; y1 += pad; }
      yt = niceTicks(y0, y1, 5); y0 = Math.min(y0, yt[0]); y1 = Math.max(y1, yt[yt.length - 1]);
    }
    if (x1 === x0) { x0 -= 1; x1 += 1; }
    const xt = opt.xCategories ? opt.xCategories.map((_, i) => i) : niceTicks(x0, x1, 6).filter((t) => t >= x0 && t <= x1);
    if (opt.xCategories) { x0 = -0.5; x1 = opt.xCategories.length - 0.5; }
    const X = (x) => L + (x - x0) / (x1 - x0) * (W - L - R);
    const Y = (y) => T + (y1 - ty(y)) / (y1 - y0) * (H - T - B);
    const Yt = (t) => T + (y1 - t) / (y1 - y0) * (H - T - B);
    const out = [];
    yt.forEach((t) => {
      const y = Yt(t).toFixed(1);
      out.push(`<line class="grid" x1="${L}" x2="${W - R}" y1="${y}" y2="${y}"/>`);
      out.push(`<text class="tick" x="${L - 6}" y="${y}" text-anchor="end" dominant-baseline="middle">${opt.logY ? "1e" + t : esc(num(t, 3))}</text>`);
    });
    xt.forEach((t) => {
      const x = X(t).toFixed(1);
      out.push(`<line class="grid" y1="${T}" y2="${H - B}" x1="${x}" x2="${x}"/>`);
      const label = opt.xCategories ? opt.xCategories[t] : num(t, 3);
      out.push(`<text class="tick" x="${x}" y="${H - B + 16}" text-anchor="middle">${esc(label)}</text>`);
    });
    out.push(`<rect class="frame" x="${L}" y="${T}" width="${W - L - R}" height="${H - T - B}"/>`);
    if (hasLine) {
      const y = Y(hline).toFixed(1);
      out.push(`<line class="hline" x1="${L}" x2="${W - R}" y1="${y}" y2="${y}"/>`);
      out.push(`<text class="tick" x="${L + 6}" y="${y - 5}">${esc(hlabel)}</text>`);
    } else if (hlabel) {
      out.push(`<text class="tick" x="${L + 6}" y="${H - B - 6}">${esc(hlabel)}</text>`);
    }
    series.forEach((s, i) => {
      const color = COLORS[i % COLORS.length];
      const good = s.points.filter((p) => p[1] !== null && isFinite(p[1]) && (!opt.logY || p[1] > 0));
      const d = good.map((p) => `${X(p[0]).toFixed(1)},${Y(p[1]).toFixed(1)}`).join(" ");
      const lastX = good.length ? good[good.length - 1][0] : "";
      out.push(`<polyline class="series" data-points="${good.length}" data-last="${lastX}" stroke="${color}" points="${d}"/>`);
      if (opt.markers || good.length <= 60)
        good.forEach((p) => out.push(`<circle cx="${X(p[0]).toFixed(1)}" cy="${Y(p[1]).toFixed(1)}" r="3" fill="${color}"><title>${esc(s.name ? s.name + ": " : "")}${esc(opt.xCategories ? opt.xCategories[p[0]] : num(p[0]))}, ${esc(num(p[1]))}</title></circle>`));
    });
    legend.forEach((e) => {
      const y = 8 + e.row * 15;
      out.push(`<rect x="${e.x}" y="${y}" width="10" height="10" fill="${COLORS[e.i % COLORS.length]}"/>`);
      out.push(`<text class="legend" x="${e.x + 14}" y="${y + 9}">${esc(e.name)}</text>`);
    });
    out.push(`<text class="label" x="${(L + W - R) / 2}" y="${H - 6}" text-anchor="middle">${esc(opt.xLabel || "")}</text>`);
    out.push(`<text class="label" transform="translate(14 ${(T + H - B) / 2}) rotate(-90)" text-anchor="middle">${esc(opt.yLabel || "")}</text>`);
    svg.innerHTML = out.join("");
  }
  function svgBox(id) {
    return `<svg id="${id}" class="plot" viewBox="0 0 640 300" preserveAspectRatio="xMidYMid meet" role="img"></svg>`;
  }

  // ------------------------------------------------------------------ queue page
  function queuePage() {
    const params = new URLSearchParams(location.search);
    let state = params.get("state") || "", batch = params.get("batch") || "";
    let version = null;
    main.innerHTML = `
      <section class="controls">
        <label>state <select id="f-state"><option value="">all</option>${STATES.map((s) => `<option>${s}</option>`).join("")}</select></label>
        <label>batch <input id="f-batch" size="6" placeholder="b3"></label>
        <span id="counts"></span><span id="workers" class="muted"></span>
      </section>
      <p id="message" class="message"></p>
      <table class="jobs"><colgroup><col class="c-id"><col class="c-name"><col class="c-state"><col class="c-batch">
        <col class="c-prio"><col class="c-tries"><col class="c-time"><col class="c-ran"><col class="c-method">
        <col class="c-iters"><col class="c-res"><col class="c-note">${TOKEN ? '<col class="c-act">' : ""}</colgroup><thead><tr>
        <th>id</th><th>name</th><th>state</th><th>batch</th><th>prio</th><th>tries</th><th>submitted</th>
        <th>ran</th><th>method</th><th>iters</th><th>residual</th><th>note</th>${TOKEN ? "<th></th>" : ""}
      </tr></thead><tbody id="rows"></tbody></table>`;
    const sel = document.getElementById("f-state"), inp = document.getElementById("f-batch");
    sel.value = state; inp.value = batch;
    function filtersChanged() {
      state = sel.value; batch = inp.value.trim(); version = null; shown = PAGE_ROWS;
      const q = new URLSearchParams();
      if (state) q.set("state", state);
      if (batch) q.set("batch", batch);
      if (TOKEN) q.set("token", TOKEN);
      history.replaceState(null, "", "/" + (q.toString() ? "?" + q : ""));
      poll.now();
    }
    sel.addEventListener("change", filtersChanged);
    inp.addEventListener("change", filtersChanged);
    const rows = document.getElementById("rows");
    onActions(rows, () => { version = null; poll.now(); });

    function row(j) {
      const name = `<a href="${esc(link("/jobs/" + j.id))}">${esc(j.name)}</a>`;
      const b = j.batch ? `<a href="${esc(link("/batches/" + j.batch.slice(1)))}">${esc(j.batch)}</a>` : "";
      const note = j.state === "running" ? (j.cancel_requested ? "cancelling" : "") : j.note;
      return `<tr id="job-${j.id}" data-state="${esc(j.state)}"><td class="num">${j.id}</td><td>${name}</td>` +
        `<td>${badge(j.state)}</td><td>${b}</td><td class="num">${j.priority}</td>` +
        `<td class="num">${j.attempts}/${j.max_attempts}</td><td class="time">${esc((j.submitted || "").replace("T", " ").slice(0, 19))}</td>` +
        `<td class="ran">${esc(j.ran)}</td><td>${esc(j.method)}</td><td class="num iters">${esc(j.iterations === null ? "" : j.iterations)}</td>` +
        `<td class="num res">${sci(j.residual)}</td><td class="note" title="${esc(note)}">${esc(note && note.length > 80 ? note.slice(0, 77) + "…" : note)}</td>` +
        (TOKEN ? `<td>${actionButtons(j)}</td>` : "") + "</tr>";
    }
    // Rows are drawn PAGE_ROWS at a time, more as the last one scrolls into view: a queue of
    // thousands of jobs still draws its first screen at once, and redraws stay cheap.
    let jobs = [], shown = PAGE_ROWS;
    const more = new IntersectionObserver((entries) => {
      if (entries.some((e) => e.isIntersecting) && shown < jobs.length) { shown += PAGE_ROWS; draw(); }
    });
    function draw() {
      more.disconnect();
      if (!jobs.length) {
        rows.innerHTML = `<tr><td colspan="13" class="muted">no jobs${state || batch ? " match these filters" : ""}</td></tr>`;
        return;
      }
      const rest = jobs.length - shown;
      rows.innerHTML = jobs.slice(0, shown).map(row).join("") + (rest > 0
        ? `<tr id="more-rows"><td colspan="13" class="muted">${rest} more job(s) below: scroll on to show them</td></tr>` : "");
      const m = document.getElementById("more-rows");
      if (m) more.observe(m);
    }
    const poll = poller(async () => {
      const q = new URLSearchParams();
      if (state) q.set("state", state);
      if (batch) q.set("batch", batch);
      if (version) q.set("since", version);
      const d = await getJSON("/api/queue?" + q);
      document.getElementById("counts").textContent =
        STATES.filter((s) => d.counts[s]).map((s) => `${d.counts[s]} ${s}`).join(", ") || "no jobs";
      document.getElementById("workers").textContent = d.workers.length
        ? `· ${d.workers.length} worker(s): ${d.workers.map((w) => `${w.id} (${w.slots} slot(s))`).join(", ")}`
        : "· no worker running";
      if (d.jobs) {
        version = d.version;
        jobs = d.jobs;
        draw();
      }
      for (const id in d.live) {
        const tr = document.getElementById("job-" + id);
        if (!tr) continue;
        const l = d.live[id];
        tr.querySelector(".iters").textContent = l.iteration === null ? "" : l.iteration;
        tr.querySelector(".res").textContent = sci(l.residual);
        tr.querySelector(".ran").textContent = l.ran;
      }
    }, 2000);
  }

  // ------------------------------------------------------------------ job page
  function jobPage() {
    const id = body.dataset.id;
    let run = null, after = -1, pts = [], last = null, shownResult = null, eventsShown = -1;
    main.innerHTML = `
      <h1 id="title">job ${esc(id)}</h1>
      <p id="message" class="message"></p>
      <div id="actions" class="actions"></div>
      <section class="two">
        <div><h2>summary</h2><table id="summary" class="kv"></table></div>
        <div><h2>residual</h2><p id="progress" class="progress"></p>${svgBox("resplot")}</div>
      </section>
      <section id="result"></section>
      <section><h2>history</h2><table id="events" class="events"></table></section>`;
    const actions = document.getElementById("actions");
    onActions(actions, () => poll.now());

    function thin() {  // keep every other point of the older half: bounded, shape kept
      if (pts.length <= MAX_POINTS) return;
      const half = Math.floor(pts.length / 2);
      pts = pts.slice(0, half).filter((_, i) => i % 2 === 0).concat(pts.slice(half));
    }
    function renderResult(job, res) {
      const el = document.getElementById("result");
      if (!res) { el.innerHTML = ""; return; }
      const parts = [];
      if (res.balance) {
        parts.push(`<h2>balance</h2><table class="kv"><tr><th>term</th><th>${esc(res.balance.units)}</th></tr>` +
          res.balance.rows.map((r) => `<tr><td>${esc(r[0])}</td><td class="num">${esc(num(r[1], 5))}</td></tr>`).join("") +
          `<tr><td>relative imbalance</td><td class="num">${sci(res.balance.relative_imbalance)}</td></tr></table>`);
      }
      if (res.probe_points.length) {
        parts.push(`<h2>probe points</h2><table class="kv"><tr><th>probe</th><th>at (m)</th><th>${esc(res.solution)} (${esc(res.units)})</th></tr>` +
          res.probe_points.map((p) => `<tr><td>${esc(p.name)}</td><td>(${p.at.map((c) => esc(num(c))).join(", ")})</td><td class="num">${esc(num(p.value, 5))}</td></tr>`).join("") + "</table>");
      }
      const stamp = encodeURIComponent(job.finished || "");
      parts.push(`<h2>figures</h2><div class="figures">` + res.figures.map((f) =>
        `<figure><img src="/figures/${job.id}/${f}.png?t=${stamp}" alt="${f === "slices" ? "mid-plane slices" : "line probes"}"><figcaption>${f === "slices" ? "mid-plane slices of " + esc(res.solution) : "line probes"}</figcaption></figure>`).join("") + "</div>");
      el.innerHTML = `<div class="result">${parts.join("")}</div>`;
    }

    const poll = poller(async () => {
      const q = new URLSearchParams({ after: String(after) });
      if (run) q.set("run", run);
      const d = await getJSON(`/api/jobs/${id}?` + q);
      const j = d.job, p = d.progress;
      document.title = `job ${j.id} ${j.name} · sevenfold`;
      document.getElementById("title").innerHTML = `job ${j.id} ${esc(j.name)} ${badge(j.state, j.cancel_requested && j.state === "running" ? "(cancelling)" : "")}` +
        (j.batch ? ` <a class="small" href="${esc(link("/batches/" + j.batch.slice(1)))}">batch ${esc(j.batch)}</a>` : "");
      actions.innerHTML = actionButtons(j) || (TOKEN ? "" : `<span class="muted">read-only (open the link with the token to cancel or retry)</span>`);
      document.getElementById("summary").innerHTML = d.rows.map((r) =>
        `<tr><th>${esc(r[0])}</th><td class="${r[0] === "error" ? "bad" : ""}">${esc(r[1])}</td></tr>`).join("");
      if (p.reset || p.run !== run) { pts = []; after = -1; }
      run = p.run;
      if (p.points.length) { pts = pts.concat(p.points); after = pts[pts.length - 1][0]; thin(); }
      last = p.last;
      const shown = last && (!pts.length || pts[pts.length - 1][0] < last[0]) ? pts.concat([last]) : pts;
      let text = j.state === "queued" ? "waiting in the queue" : (p.text || "");
      if (p.skipped) text += ` (${p.skipped} unreadable log line(s) skipped)`;
      document.getElementById("progress").textContent = text;
      plot(document.getElementById("resplot"), [{ name: "relative residual", points: shown }], {
        logY: true, xLabel: "iteration", yLabel: "relative residual", hline: p.rtol,
        hlineLabel: p.rtol ? "rtol " + Number(p.rtol).toExponential(0) : "", empty: text || "no residuals yet",
      });
      const key = j.state === "done" && d.result ? j.finished : null;
      if (key !== shownResult) { renderResult(j, d.result); shownResult = key; }
      if (d.events_total !== eventsShown) {
        eventsShown = d.events_total;
        document.getElementById("events").innerHTML = "<tr><th>time</th><th>event</th><th>detail</th></tr>" +
          (d.events_total > d.events.length ? `<tr><td colspan="3" class="muted">${d.events_total - d.events.length} older events not shown</td></tr>` : "") +
          d.events.map((e) => `<tr><td class="time">${esc(e.time.replace("T", " "))}</td><td>${esc(e.event)}</td><td>${esc(e.detail)}</td></tr>`).join("");
      }
    }, 1000);
  }

  // ------------------------------------------------------------------ batch page
  function batchPage() {
    const id = body.dataset.id;
    const params = new URLSearchParams(location.search);
    let quantity = params.get("quantity") || "", xkey = params.get("x") || "";
    main.innerHTML = `
      <h1 id="title">batch b${esc(id)}</h1>
      <p id="about" class="muted"></p>
      <p id="message" class="message"></p>
      <section class="controls">
        <label>quantity <select id="f-q"></select></label>
        <label>against <select id="f-x"></select></label>
      </section>
      ${svgBox("batchplot")}
      <table class="jobs auto" id="batch-table"></table>`;
    const qs = document.getElementById("f-q"), xs = document.getElementById("f-x");
    function changed() {
      quantity = qs.value; xkey = xs.value;
      const q = new URLSearchParams({ quantity, x: xkey });
      if (TOKEN) q.set("token", TOKEN);
      history.replaceState(null, "", `/batches/${id}?` + q);
      poll.now();
    }
    qs.addEventListener("change", changed);
    xs.addEventListener("change", changed);
    onActions(document.getElementById("batch-table"), () => poll.now());
    const fmtv = (v) => (typeof v === "number" ? num(v) : JSON.stringify(v));

    const poll = poller(async () => {
      const q = new URLSearchParams();
      if (quantity) q.set("quantity", quantity);
      const d = await getJSON(`/api/batches/${id}?` + q);
      const keys = d.batch.keys;
      if (!keys.includes(xkey)) xkey = keys[0] || "";
      quantity = d.quantity;
      document.getElementById("about").textContent =
        `${d.batch.size} jobs (${d.batch.mode} of ${keys.join(", ")}) from ${d.batch.source}, submitted ${d.batch.submitted.replace("T", " ")}`;
      if (qs.options.length !== d.quantities.length)
        qs.innerHTML = d.quantities.map((n) => `<option>${esc(n)}</option>`).join("");
      qs.value = quantity;
      if (xs.options.length !== keys.length) xs.innerHTML = keys.map((k) => `<option>${esc(k)}</option>`).join("");
      xs.value = xkey;
      const others = keys.filter((k) => k !== xkey);
      const numeric = d.jobs.every((j) => typeof j.variant[xkey] === "number");
      const cats = numeric ? null : [...new Set(d.jobs.map((j) => fmtv(j.variant[xkey])))];
      const groups = new Map();
      d.jobs.forEach((j) => {
        const name = others.map((k) => `${k} = ${fmtv(j.variant[k])}`).join(", ");
        if (!groups.has(name)) groups.set(name, []);
        if (j.value !== null) groups.get(name).push([numeric ? j.variant[xkey] : cats.indexOf(fmtv(j.variant[xkey])), j.value]);
      });
      const series = [...groups].map(([name, points]) => ({ name, points: points.sort((a, b) => a[0] - b[0]) }));
      const positive = d.jobs.every((j) => j.value === null || j.value > 0);
      plot(document.getElementById("batchplot"), series, {
        logY: quantity === "final relative residual" && positive, xLabel: xkey,
        yLabel: quantity + (d.units ? ` (${d.units})` : ""), xCategories: cats, markers: true,
        empty: "no finished jobs yet",
      });
      document.getElementById("batch-table").innerHTML =
        `<thead><tr><th>id</th><th>name</th><th>state</th>${keys.map((k) => `<th>${esc(k)}</th>`).join("")}<th>${esc(quantity)}</th>${TOKEN ? "<th></th>" : ""}</tr></thead><tbody>` +
        d.jobs.map((j) => `<tr><td class="num">${j.id}</td><td><a href="${esc(link("/jobs/" + j.id))}">${esc(j.name)}</a></td><td>${badge(j.state)}</td>` +
          keys.map((k) => `<td class="num">${esc(fmtv(j.variant[k]))}</td>`).join("") +
          `<td class="num">${esc(num(j.value, 5))}</td>${TOKEN ? `<td>${actionButtons(j)}</td>` : ""}</tr>`).join("") + "</tbody>";
    }, 3000);
  }

  // ------------------------------------------------------------------ start
  document.getElementById("home-link").href = link("/");
  document.getElementById("mode").innerHTML = TOKEN
    ? `<span class="pill act-on" title="this link carries the token of this start of the view">cancel and retry enabled</span>`
    : `<span class="pill" title="open the link with ?token=... that sevenfold view printed to act on jobs">read-only</span>`;
  const page = body.dataset.page;
  if (page === "queue") queuePage();
  else if (page === "job") jobPage();
  else if (page === "batch") batchPage();
  else main.innerHTML = `<h1>not found</h1><p>${esc(body.dataset.message || "")}</p><p><a href="${esc(link("/"))}">the queue</a></p>`;
})();
