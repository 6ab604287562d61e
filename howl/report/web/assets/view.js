// howl's live page: draws the state the program pushes over /stream (server-sent events).
// Read-only: it only fetches; nothing it does reaches the audio path.
"use strict";
(function () {
  const Q = document.body.dataset.q || "";
  const $ = (id) => document.getElementById(id);
  const F_LO = 40, F_HI = 20000, DB_LO = -110, DB_HI = 0;
  const lags = [];  // [seq, ms from the audio block to this page's redraw, ms from the update's publication]
  window.howlLags = lags;
  window.howlState = null;

  function fmtHz(f) {
    if (f == null) return "–";
    return f >= 1000 ? (f / 1000).toFixed(f >= 10000 ? 2 : 3) + " kHz" : f.toFixed(1) + " Hz";
  }
  function fmtDb(x, plus) {
    if (x == null) return "–";
    const s = x.toFixed(1);
    return (plus && x > 0 ? "+" : "") + s.replace("-", "−");
  }
  function fmtClock(s) {
    const m = Math.floor(s / 60), r = s - 60 * m;
    return m + ":" + (r < 10 ? "0" : "") + r.toFixed(1);
  }
  function cutText(c) {
    const depth = c.full_notch ? "full notch" : fmtDb(c.depth_db) + " dB";
    return "cut " + fmtHz(c.centre_hz) + " · " + depth + " · Q " + c.q.toFixed(1) +
      " (" + c.bandwidth_oct.toFixed(2) + " oct)";
  }
  function el(tag, cls, text) {
    const e = document.createElement(tag);
    if (cls) e.className = cls;
    if (text != null) e.textContent = text;
    return e;
  }
  const arrow = { rising: "↑", falling: "↓", steady: "→" };

  function sizeCanvas(cv) {
    const r = cv.getBoundingClientRect(), k = window.devicePixelRatio || 1;
    const w = Math.max(1, Math.round(r.width * k)), h = Math.max(1, Math.round(r.height * k));
    if (cv.width !== w || cv.height !== h) { cv.width = w; cv.height = h; }
    const g = cv.getContext("2d");
    g.setTransform(k, 0, 0, k, 0, 0);
    return [g, r.width, r.height];
  }
  const PAD = { l: 44, r: 8, t: 8, b: 22 };
  function xOfHz(f, w) {
    return PAD.l + (w - PAD.l - PAD.r) * Math.log(f / F_LO) / Math.log(F_HI / F_LO);
  }
  function yOfDb(d, h) {
    const v = Math.min(DB_HI, Math.max(DB_LO, d));
    return PAD.t + (h - PAD.t - PAD.b) * (DB_HI - v) / (DB_HI - DB_LO);
  }

  function drawSpectrum(s) {
    const [g, w, h] = sizeCanvas($("spec"));
    g.clearRect(0, 0, w, h);
    g.font = "13px system-ui, sans-serif";
    g.strokeStyle = "#2a2f37"; g.fillStyle = "#8c929b"; g.lineWidth = 1;
    for (let d = DB_HI; d >= DB_LO; d -= 10) {
      const y = yOfDb(d, h);
      g.beginPath(); g.moveTo(PAD.l, y); g.lineTo(w - PAD.r, y); g.stroke();
      if (d % 20 === 0) g.fillText(String(d).replace("-", "−"), 4, y + 4);
    }
    for (const f of [50, 100, 200, 500, 1000, 2000, 5000, 10000, 20000]) {
      const x = xOfHz(f, w);
      g.beginPath(); g.moveTo(x, PAD.t); g.lineTo(x, h - PAD.b); g.stroke();
      const lab = f >= 1000 ? f / 1000 + "k" : String(f);
      g.fillText(lab, Math.min(x - g.measureText(lab).width / 2, w - PAD.r - g.measureText(lab).width), h - 5);
    }
    const fr = s.spectrum.freq_hz, lv = s.spectrum.level_db;
    if (fr.length) {
      g.beginPath();
      g.moveTo(xOfHz(fr[0], w), yOfDb(DB_LO, h));
      for (let i = 0; i < fr.length; i++) g.lineTo(xOfHz(fr[i], w), yOfDb(lv[i], h));
      g.lineTo(xOfHz(fr[fr.length - 1], w), yOfDb(DB_LO, h));
      g.closePath();
      g.fillStyle = "rgba(95,176,217,0.18)"; g.fill();
      g.strokeStyle = "#5fb0d9"; g.lineWidth = 1.5; g.stroke();
    }
    // the followed peaks: a line at each, a tag with its frequency, state and trend
    const tags = $("tags");
    tags.replaceChildren();
    const colours = getComputedStyle(document.body);
    s.candidates.forEach((c, i) => {
      const x = xOfHz(c.freq_hz, w);
      g.strokeStyle = colours.getPropertyValue("--st-" + c.state).trim() || "#ccc";
      const faint = c.state === "program" || c.state === "product";
      g.lineWidth = faint ? 1 : 2;
      g.setLineDash(faint ? [3, 3] : []);
      g.beginPath(); g.moveTo(x, PAD.t); g.lineTo(x, h - PAD.b); g.stroke();
      g.setLineDash([]);
      const t = el("div", "tag s-" + c.state, fmtHz(c.freq_hz) + " " + c.words + " " + arrow[c.trend]);
      t.dataset.freqHz = c.freq_hz; t.dataset.state = c.words;
      t.style.left = x + "px"; t.style.top = (PAD.t + 2 + 22 * (i % 6)) + "px";
      tags.appendChild(t);
    });
    const ul = $("cands");
    ul.replaceChildren(...s.candidates.map((c) => {
      const li = el("li", "s-" + c.state, fmtHz(c.freq_hz) + " · " + c.words + " · " + arrow[c.trend] + " " +
        fmtDb(c.trend_db_per_s, true) + " dB/s · " + fmtDb(c.level_db) + " dBFS");
      li.dataset.freqHz = c.freq_hz;
      return li;
    }));
  }

  let listsKey = null;
  function drawEvents(s) {
    // the lists change only with a new event or cut: rebuild them only then
    const key = s.n_events + "|" + JSON.stringify(s.cuts) + "|" + s.advice.length;
    if (key === listsKey) return;
    listsKey = key;
    $("events-none").hidden = s.events.length > 0;
    $("events").replaceChildren(...s.events.map((e) => {
      const li = el("li", "event s-" + e.kind);
      li.dataset.freqHz = e.freq_hz; li.dataset.kind = e.words;
      li.append(el("span", "when", fmtClock(e.time_s)), el("span", "kind", e.words),
        el("span", "freq", fmtHz(e.freq_hz) + " at " + fmtDb(e.level_db) + " dBFS"));
      li.append(el("span", "spacer"), el("span", "spacer"), el("span", "cut", cutText(e.cut)));
      let note = "";
      if (e.margin_db != null) note = e.margin_db > 0 ? (e.margin_assumed ? "about " : "") + fmtDb(e.margin_db) + " dB short of howling"
        : (e.margin_assumed ? "about " : "") + fmtDb(-e.margin_db) + " dB past howling";
      if (e.off_crossing) note += (note ? " · " : "") + "not where the measured loop peaks: maybe program";
      if (note) li.append(el("span", "spacer"), el("span", "note", note));
      return li;
    }));
    const body = $("cuts").tBodies[0];
    $("cuts-none").hidden = s.cuts.length > 0;
    body.replaceChildren(...s.cuts.map((c) => {
      const tr = el("tr");
      tr.dataset.freqHz = c.centre_hz;
      tr.append(el("td", null, fmtHz(c.centre_hz)), el("td", null, c.full_notch ? "full notch" : fmtDb(c.depth_db) + " dB"),
        el("td", null, c.q.toFixed(1)), el("td", null, c.bandwidth_oct.toFixed(2) + " oct"));
      return tr;
    }));
    $("advice").replaceChildren(...s.advice.map((a) => el("li", null, a)));
  }

  function drawMargin(s) {
    const m = s.margin;
    $("margin-box").hidden = !m;
    if (!m) return;
    const now = m.now;
    $("margin-now").textContent = fmtDb(now.gain_margin_db, true);
    // a figure the tracker is unsure of is drawn faded, with its status in words beside it
    const unsure = /not enough/.test(now.status);
    $("margin-now").parentElement.classList.toggle("low", m.below_warning);
    $("margin-now").parentElement.classList.toggle("unsure", unsure);
    $("margin-status").classList.toggle("unsure", unsure);
    $("margin-pm").textContent = now.uncertainty_db == null ? "" : "± " + now.uncertainty_db.toFixed(1);
    $("margin-freq").textContent = fmtHz(now.howl_freq_hz);
    $("margin-mag").textContent = fmtDb(now.magnitude_margin_db, true) + " dB";
    $("margin-status").textContent = now.status === "ok" ? "tracking" : now.status;
    const [g, w, h] = sizeCanvas($("margin-plot"));
    g.clearRect(0, 0, w, h);
    const hist = m.history.filter((p) => p[1] != null);
    // the time axis grows by whole minutes up to the history kept (the first minutes are not squashed)
    const tEnd = now.time_s, tFirst = m.history.length ? m.history[0][0] : tEnd;
    const span = Math.min(m.history_s, Math.max(60, 60 * Math.ceil((tEnd - tFirst) / 60)));
    // the level axis holds the margins and the warning; a wide ± band is clipped at the edges
    let lo = m.warn_db - 3, hi = m.warn_db + 9;
    for (const p of hist) { lo = Math.min(lo, p[1] - 1); hi = Math.max(hi, p[1] + 1); }
    lo = Math.max(lo, -12); hi = Math.min(hi, 30);
    const step = (hi - lo) > 24 ? 6 : 3;
    lo = Math.floor(lo / step) * step; hi = Math.ceil(hi / step) * step;
    const X = (t) => PAD.l + (w - PAD.l - PAD.r) * (1 - (tEnd - t) / span);
    const Y = (d) => PAD.t + (h - PAD.t - PAD.b) * (hi - Math.min(hi, Math.max(lo, d))) / (hi - lo);
    g.font = "13px system-ui, sans-serif"; g.fillStyle = "#8c929b"; g.strokeStyle = "#2a2f37"; g.lineWidth = 1;
    for (let d = lo; d <= hi; d += step) {
      g.beginPath(); g.moveTo(PAD.l, Y(d)); g.lineTo(w - PAD.r, Y(d)); g.stroke();
      g.fillText(String(d).replace("-", "−"), 6, Y(d) + 4);
    }
    const tick = span > 120 ? 60 : 30;
    for (let k = 0; k <= span; k += tick) {
      const lab = k ? "−" + (k % 60 ? (k / 60).toFixed(1) : k / 60) + " min" : "now";
      g.fillText(lab, Math.min(X(tEnd - k) - 14, w - PAD.r - g.measureText(lab).width), h - 5);
    }
    if (hist.length) {
      g.fillStyle = "rgba(127,214,164,0.2)";
      g.beginPath();
      hist.forEach((p, i) => { const y = Y(p[1] + (p[2] || 0)); i ? g.lineTo(X(p[0]), y) : g.moveTo(X(p[0]), y); });
      for (let i = hist.length - 1; i >= 0; i--) g.lineTo(X(hist[i][0]), Y(hist[i][1] - (hist[i][2] || 0)));
      g.closePath(); g.fill();
      g.strokeStyle = "#7fd6a4"; g.lineWidth = 2; g.beginPath();
      hist.forEach((p, i) => (i ? g.lineTo(X(p[0]), Y(p[1])) : g.moveTo(X(p[0]), Y(p[1]))));
      g.stroke();
    }
    g.strokeStyle = "#ff5a47"; g.setLineDash([6, 4]); g.lineWidth = 1.5;
    g.beginPath(); g.moveTo(PAD.l, Y(m.warn_db)); g.lineTo(w - PAD.r, Y(m.warn_db)); g.stroke(); g.setLineDash([]);
    g.fillStyle = "#ff5a47"; g.fillText("warn below " + m.warn_db.toFixed(1) + " dB", PAD.l + 4, Y(m.warn_db) - 4);
  }

  function drawTop(s) {
    $("what").textContent = s.command + (s.label ? " · " + s.label : "");
    $("elapsed").textContent = fmtClock(s.elapsed_s || 0);
    $("level").textContent = s.level_dbfs == null ? "–" : fmtDb(s.level_dbfs) + " dBFS";
    $("meter-fill").style.width = (s.level_dbfs == null ? 0 : Math.max(0, Math.min(100, (s.level_dbfs + 80) * 1.25))) + "%";
    $("overflows").textContent = String(s.overflows);
    $("overflows").style.color = s.overflows ? "var(--howling)" : "";
    if (!$("cautions").childElementCount) $("cautions").replaceChildren(...s.cautions.map((c) => el("p", null, c)));
  }

  function draw(s) {
    window.howlState = s;
    drawTop(s); drawSpectrum(s); drawEvents(s); drawMargin(s);
    document.body.dataset.seq = s.seq;
    if (s.block_wall_s != null) {
      const now = Date.now();
      lags.push([s.seq, now - 1000 * s.block_wall_s, now - 1000 * s.sent_wall_s]);
      if (lags.length > 20000) lags.splice(0, lags.length - 20000);
    }
  }

  function setLink(cls, text) { const l = $("link"); l.className = "link " + cls; l.textContent = text; }

  let ended = false;
  const src = new EventSource("/stream" + Q);
  src.onopen = () => setLink("live", "live");
  src.onmessage = (ev) => draw(JSON.parse(ev.data));
  src.addEventListener("end", () => { ended = true; src.close(); setLink("ended", "audio stopped"); });
  src.onerror = () => { if (!ended) setLink("lost", "reconnecting"); };
  window.addEventListener("resize", () => { if (window.howlState) draw(window.howlState); });
})();
