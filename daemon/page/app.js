// lyapcast operator view. Plain JavaScript, no framework, no build step.
//
// Polls the daemon's HTTP API (docs/http-api.md) every POLL_MS while the tab
// is visible and draws, per feed: the recent observed channels and the latest
// forecast as SVG lines with the predictability horizon, suspect readings as
// marks beside them, the health verdict and its figures, and the model
// history. Every piece of text from the API is
// inserted with textContent / setAttribute, never as markup. A read token, when
// the daemon asks for one (401), is kept in sessionStorage and sent only as an
// Authorization header.
"use strict";

(function () {
  const POLL_MS = 2000;
  const TOKEN_KEY = "lyapcast.readToken";
  const SVG_NS = "http://www.w3.org/2000/svg";
  const MODELS_LIMIT = 20;
  const MAX_SAMPLES = 5000;          // per plot, newest kept
  const DEFAULT_OBSERVED_STEPS = 300; // without a Lyapunov time
  const DEFAULT_FORECAST_STEPS = 200;
  const LYAPUNOV_TIMES_SHOWN = 3;    // observed span and least forecast span, in Lyapunov times
  const MIN_STEPS = 50;
  const MAX_STEPS = 2000;

  // ---------------------------------------------------------------- token

  let memoryToken = null;  // used when sessionStorage is unavailable
  function getToken() {
    try { return window.sessionStorage.getItem(TOKEN_KEY); } catch (e) { return memoryToken; }
  }
  function setToken(value) {
    memoryToken = value;
    try {
      if (value === null) window.sessionStorage.removeItem(TOKEN_KEY);
      else window.sessionStorage.setItem(TOKEN_KEY, value);
    } catch (e) { /* memoryToken holds it */ }
  }

  // ---------------------------------------------------------------- API

  class AuthNeeded extends Error {
    constructor(message, hadToken) { super(message); this.hadToken = hadToken; }
  }
  class ApiError extends Error {
    constructor(status, code, message) { super(message); this.status = status; this.code = code; }
  }

  async function api(path) {
    const headers = { "Accept": "application/json" };
    const token = getToken();
    if (token) headers["Authorization"] = "Bearer " + token;
    let res;
    try {
      res = await fetch(path, { headers: headers, cache: "no-store", credentials: "omit", redirect: "error" });
    } catch (e) {
      throw new ApiError(0, "network", "cannot reach the daemon (" + (e && e.message ? e.message : "network error") + ")");
    }
    let body = null;
    try { body = await res.json(); } catch (e) { body = null; }
    const err = body && typeof body === "object" && body.error ? body.error : null;
    if (res.status === 401) {
      throw new AuthNeeded(err && err.message ? err.message : "a read token is needed", Boolean(token));
    }
    if (!res.ok) {
      throw new ApiError(res.status, err ? err.code : "http-" + res.status,
                         err && err.message ? err.message : "HTTP " + res.status);
    }
    if (body === null) throw new ApiError(res.status, "bad-body", "the daemon's answer was not JSON");
    return body;
  }

  // Runs an API call for one part of a feed: an AuthNeeded goes up (the whole
  // page needs the token), any other error is kept to be shown in words.
  async function part(promise) {
    try {
      return { value: await promise, error: null };
    } catch (e) {
      if (e instanceof AuthNeeded) throw e;
      return { value: null, error: e };
    }
  }

  function clamp(v, lo, hi) { return Math.min(hi, Math.max(lo, v)); }

  const lastHorizon = new Map();  // feed id -> horizon seconds of the previous forecast

  async function loadFeed(feed) {
    const id = encodeURIComponent(feed.id);
    const out = { feed: feed, status: null, samples: null, forecast: null, models: null, errors: {} };
    const status = await part(api("/v1/feeds/" + id + "/status"));
    out.status = status.value;
    if (status.error) out.errors.status = status.error;

    const step = feed.step_s > 0 ? feed.step_s : 1;
    const chosen = out.status && out.status.lyapunov ? out.status.lyapunov.chosen : null;
    const lt = chosen && chosen.lyapunov_time_s > 0 ? chosen.lyapunov_time_s : null;
    let observedSpan, forecastSteps;
    if (lt) {
      observedSpan = clamp(LYAPUNOV_TIMES_SHOWN * lt, MIN_STEPS * step, MAX_STEPS * step);
      let span = LYAPUNOV_TIMES_SHOWN * lt;
      const h = lastHorizon.get(feed.id);
      if (h && h > 0) span = Math.max(span, Math.min(1.25 * h, 8 * lt));  // keep the horizon in view
      forecastSteps = Math.round(clamp(Math.ceil(span / step), MIN_STEPS, MAX_STEPS));
    } else {
      observedSpan = DEFAULT_OBSERVED_STEPS * step;
      forecastSteps = DEFAULT_FORECAST_STEPS;
    }

    const window_ = out.status ? out.status.window : feed.window;
    const newest = window_ && window_.newest ? window_.newest.epoch_s : null;
    const hasModel = out.status ? out.status.model !== null : Boolean(feed.model);
    const jobs = [];
    jobs.push(newest !== null ? part(loadSamples(id, newest - observedSpan)) : Promise.resolve({ value: null, error: null }));
    jobs.push(hasModel && newest !== null
      ? part(api("/v1/feeds/" + id + "/forecast?from=latest&steps=" + forecastSteps))
      : Promise.resolve({ value: null, error: null }));
    jobs.push(part(api("/v1/feeds/" + id + "/models?limit=" + MODELS_LIMIT)));
    const [samples, forecast, models] = await Promise.all(jobs);
    out.samples = samples.value; if (samples.error) out.errors.samples = samples.error;
    out.forecast = forecast.value; if (forecast.error) out.errors.forecast = forecast.error;
    out.models = models.value; if (models.error) out.errors.models = models.error;
    if (out.forecast && out.forecast.horizon) lastHorizon.set(feed.id, out.forecast.horizon.seconds);
    out.newest = newest;
    return out;
  }

  // Stored samples from `from` (epoch seconds) to the newest, following pages.
  async function loadSamples(id, from) {
    let all = [];
    let cursor = from.toFixed(6);
    for (let page = 0; page < 4 && cursor !== null; ++page) {
      const body = await api("/v1/feeds/" + id + "/samples?limit=" + MAX_SAMPLES + "&from=" + encodeURIComponent(cursor));
      all = all.concat(body.samples || []);
      cursor = body.next ? String(body.next.epoch_s) : null;
    }
    if (all.length > MAX_SAMPLES) all = all.slice(all.length - MAX_SAMPLES);
    return all;
  }

  // ---------------------------------------------------------------- formatting

  function isNum(v) { return typeof v === "number" && Number.isFinite(v); }

  function num(v, sig) {
    if (!isNum(v)) return "—";
    sig = sig || 3;
    if (Math.abs(v) >= Math.pow(10, sig)) return String(Math.round(v));
    return String(Number(v.toPrecision(sig)));
  }

  function duration(s) {
    if (!isNum(s)) return "—";
    const a = Math.abs(s);
    if (a < 1) return num(s * 1000) + " ms";
    if (a < 120) return num(s) + " s";
    if (a < 7200) return num(s / 60) + " min";
    if (a < 172800) return num(s / 3600) + " h";
    return num(s / 86400) + " d";
  }

  function timeText(t) {
    if (!t || typeof t.rfc3339 !== "string") return "—";
    // "2026-01-01T00:00:45.250000Z" -> "2026-01-01 00:00:45.250 UTC"
    const m = /^(\d{4}-\d{2}-\d{2})T(\d{2}:\d{2}:\d{2})(\.\d{1,3})?\d*Z$/.exec(t.rfc3339);
    return m ? m[1] + " " + m[2] + (m[3] || "") + " UTC" : t.rfc3339;
  }

  function raw(v) { return v === null || v === undefined ? "null" : String(v); }

  // ---------------------------------------------------------------- DOM helpers

  function el(tag, attrs, ...children) {
    const node = document.createElement(tag);
    setAttrs(node, attrs);
    append(node, children);
    return node;
  }
  function svg(tag, attrs, ...children) {
    const node = document.createElementNS(SVG_NS, tag);
    setAttrs(node, attrs);
    append(node, children);
    return node;
  }
  function setAttrs(node, attrs) {
    if (!attrs) return;
    for (const [k, v] of Object.entries(attrs)) {
      if (v === null || v === undefined || v === false) continue;
      if (k === "class") node.setAttribute("class", v);
      else if (k === "text") node.textContent = String(v);
      else node.setAttribute(k, String(v));
    }
  }
  function append(node, children) {
    for (const c of children) {
      if (c === null || c === undefined || c === false) continue;
      if (Array.isArray(c)) append(node, c);
      else if (typeof c === "string" || typeof c === "number") node.appendChild(document.createTextNode(String(c)));
      else node.appendChild(c);
    }
  }

  const $ = (id) => document.getElementById(id);

  // ---------------------------------------------------------------- page state

  let timer = null;
  let inFlight = false;
  let authShown = false;
  let lastOk = null;

  function setConn(state, text) {
    const c = $("conn-state");
    c.setAttribute("data-state", state);
    c.textContent = text;
  }

  function showBanner(text, isError) {
    const b = $("banner");
    b.textContent = text;
    b.className = isError ? "banner error" : "banner";
    b.hidden = !text;
  }

  function showAuth(hadToken) {
    authShown = true;
    if (hadToken) setToken(null);
    const msg = $("auth-message");
    msg.textContent = "";
    if (hadToken) {
      msg.appendChild(el("span", { class: "rejected", text: "The token was not accepted. " }));
    }
    append(msg, ["This daemon requires a read token. Enter it to see the feeds. It is kept only in this " +
      "browser tab (session storage) and sent as an Authorization header, never in an address."]);
    $("auth").hidden = false;
    $("forget-token").hidden = true;
    $("feeds").replaceChildren();
    sections.clear();
    showBanner("", false);
    setConn("auth", "Token needed");
    $("auth-token").focus();
  }

  function schedule(delay) {
    clearTimeout(timer);
    timer = null;
    if (document.hidden || authShown) return;
    timer = setTimeout(poll, delay);
  }

  async function poll() {
    clearTimeout(timer);
    timer = null;
    if (inFlight || authShown) return;
    if (document.hidden) { setConn("paused", "Paused (tab hidden)"); return; }
    inFlight = true;
    try {
      const list = await api("/v1/feeds");
      const feeds = Array.isArray(list.feeds) ? list.feeds : [];
      const results = await Promise.all(feeds.map(loadFeed));
      render(list, results);
      lastOk = new Date();
      if (document.hidden) setConn("paused", "Paused (tab hidden)");  // hidden while this poll ran
      else setConn("live", "Live");
      $("last-update").textContent = "updated " + lastOk.toLocaleTimeString();
      $("forget-token").hidden = !getToken();
      showBanner(list.storage_available === false
        ? "Storage is unavailable: the daemon cannot commit samples (disk full or failing)." : "", true);
    } catch (e) {
      if (e instanceof AuthNeeded) {
        showAuth(e.hadToken);
      } else {
        setConn("error", "No connection");
        showBanner((lastOk ? "Figures below are from " + lastOk.toLocaleTimeString() + " and may be out of date. " : "") +
          "Cannot read the daemon: " + (e && e.message ? e.message : String(e)), true);
      }
    } finally {
      inFlight = false;
      schedule(POLL_MS);
    }
  }

  // ---------------------------------------------------------------- rendering

  const sections = new Map();  // feed id -> section element

  function render(list, results) {
    const main = $("feeds");
    const seen = new Set();
    if (results.length === 0) {
      main.replaceChildren(el("p", { class: "note strong", text: "The daemon has no feeds configured." }));
      sections.clear();
      return;
    }
    const order = [];
    for (const r of results) {
      seen.add(r.feed.id);
      let sec = sections.get(r.feed.id);
      if (!sec) {
        sec = el("section", { class: "feed", "data-feed": r.feed.id });
        sections.set(r.feed.id, sec);
      }
      sec.replaceChildren(...renderFeed(r));
      sec.setAttribute("data-verdict", r.status && r.status.health ? r.status.health.verdict : "indeterminate");
      order.push(sec);
    }
    for (const id of Array.from(sections.keys())) if (!seen.has(id)) sections.delete(id);
    main.replaceChildren(...order);
  }

  const VERDICT_WORDS = {
    normal: "Normal: the model is fresh and tracks the data",
    alert: "Alert: needs attention, see the reasons below",
    alarm: "Alarm: act now on the reasons below",
    indeterminate: "Indeterminate: cannot judge yet (no data or no model)",
  };

  function renderFeed(r) {
    const f = r.feed;
    const s = r.status;
    const nodes = [];
    const channels = Array.isArray(f.channels) ? f.channels : [];
    const count = s && s.window ? s.window.samples : (f.window ? f.window.samples : 0);

    const title = el("div", { class: "feed-title" },
      el("h2", { text: f.id }),
      el("div", { class: "meta", text: channels.length + (channels.length === 1 ? " channel" : " channels") +
        " · step " + duration(f.step_s) + " · " + count + " samples in the window" +
        (f.dynamics_known ? " · known dynamics" : "") }));

    const verdict = s && s.health ? s.health.verdict : "indeterminate";
    const reasons = s && s.health && Array.isArray(s.health.reasons) ? s.health.reasons : [];
    const vbox = el("div", { class: "verdict-box" },
      el("span", { class: "verdict", "data-field": "verdict", "data-value": verdict, text: verdict }),
      el("span", { class: "verdict-words", text: VERDICT_WORDS[verdict] || verdict }),
      reasons.length
        ? el("ul", { class: "reasons", "data-field": "reasons" }, reasons.map((x) => el("li", { text: String(x) })))
        : el("ul", { class: "reasons", "data-field": "reasons" }),
      s && s.paused ? el("span", { class: "paused-note", text: "Paused (plant shutdown): no retraining, no drift alarms" }) : null);
    nodes.push(el("div", { class: "feed-head" }, title, vbox));

    if (!s) {
      nodes.push(el("p", { class: "note strong", text: "Status unavailable: " + errText(r.errors.status) }));
    } else {
      nodes.push(renderFigures(r));
    }
    nodes.push(renderPlots(r));
    nodes.push(el("h3", { text: "Model history (newest first)" }));
    nodes.push(renderModels(r));
    return nodes;
  }

  function errText(e) { return e ? (e.message || String(e)) : "unknown error"; }

  function level(v, alert, alarm) {
    if (!isNum(v)) return null;
    if (isNum(alarm) && v >= alarm) return "alarm";
    if (isNum(alert) && v >= alert) return "alert";
    return null;
  }

  function figure(field, label, text, rawValue, detail, lvl) {
    const dd = el("dd", { "data-field": field, "data-value": raw(rawValue) }, text);
    if (detail) dd.appendChild(el("span", { class: "detail", text: detail }));
    return el("div", { class: "figure" + (lvl ? " " + lvl : "") }, el("dt", { text: label }), dd);
  }

  function renderFigures(r) {
    const s = r.status;
    const th = s.health && s.health.thresholds ? s.health.thresholds : {};
    const d = s.drift || {};
    const st = s.staleness || {};
    const ly = s.lyapunov && s.lyapunov.chosen ? s.lyapunov.chosen : null;
    const m = s.model;
    const cad = s.cadence || {};
    const job = s.last_job;
    const figs = [];

    let driftDetail = "rolling one-step error / validation error; alert at " + num(th.drift_alert) +
      ", alarm at " + num(th.drift_alarm);
    if (d.warming_up) driftDetail = "warming up (" + (d.scored || 0) + " samples scored); " + driftDetail;
    if (d.flag) driftDetail = "DRIFT FLAGGED" + (d.flagged_at ? " at " + timeText(d.flagged_at) : "") + "; " + driftDetail;
    figs.push(figure("drift-ratio", "Drift ratio", num(d.ratio), d.ratio, driftDetail,
      d.flag ? "alarm" : level(d.ratio, th.drift_alert, th.drift_alarm)));

    figs.push(figure("data-age", "Data age (wall time)", duration(st.data_age_s), st.data_age_s,
      s.window && s.window.newest ? "newest sample " + timeText(s.window.newest) : "no data yet",
      level(st.data_age_s, th.data_age_alert_s, th.data_age_alarm_s)));

    figs.push(figure("model-version", "Active model", m ? "v" + m.version : "none yet", m ? m.version : null,
      m ? (m.family ? String(m.family).replace(/_/g, " ") + (m.family_reason ? " (" + m.family_reason + ")" : "") + "; " : "") +
          "trained on data up to " + timeText(m.trained_to) + "; validation error " + num(m.validation_error)
        : "the first model is trained once the window holds enough data", null));

    figs.push(figure("model-age", "Model age (wall time)", duration(st.model_age_s), st.model_age_s,
      m && m.created_at ? "created " + String(m.created_at) : null, null));

    figs.push(figure("since-training", "Since training", isNum(st.since_training_lyapunov_times)
      ? num(st.since_training_lyapunov_times) + " Lyapunov times" : "—", st.since_training_lyapunov_times,
      (isNum(st.since_training_s) ? duration(st.since_training_s) + " of data; " : "") +
      "alert at " + num(th.model_age_alert_lyapunov) + ", alarm at " + num(th.model_age_alarm_lyapunov) +
      (th.model_age_alert_derived || th.model_age_alarm_derived ? " (derived from the retrain cadence)" : ""),
      level(st.since_training_lyapunov_times, th.model_age_alert_lyapunov, th.model_age_alarm_lyapunov)));

    let lyText = "—", lyDetail = "no Lyapunov exponent estimate yet";
    if (ly) {
      lyText = isNum(ly.lyapunov_time_s) ? duration(ly.lyapunov_time_s) : "none";
      lyDetail = "from the " + String(ly.source) + " (λ = " + num(ly.per_s) + " /s)" +
        (isNum(ly.lyapunov_time_s) ? "" : "; λ ≤ 0: no exponential error growth");
    }
    figs.push(figure("lyapunov-time", "Lyapunov time", lyText, ly ? ly.lyapunov_time_s : null, lyDetail, null));

    const hz = r.forecast && r.forecast.horizon ? r.forecast.horizon : null;
    let hzText = "—", hzDetail = r.forecast ? "" : "no forecast yet";
    if (hz) {
      if (isNum(hz.seconds)) {
        hzText = duration(hz.seconds);
        hzDetail = (isNum(hz.lyapunov_times) ? num(hz.lyapunov_times) + " Lyapunov times; " : "") +
          "error " + num(hz.e0) + " grows to " + num(hz.tol);
      } else {
        hzText = "none";
        hzDetail = hz.reason ? String(hz.reason) : "not known";
      }
    }
    figs.push(figure("horizon", "Predictability horizon", hzText, hz ? hz.seconds : null, hzDetail,
      hz && hz.seconds === 0 ? "alarm" : null));

    let nextText = "—";
    if (s.paused) nextText = "paused";
    else if (cad.running) nextText = "running now";
    else if (cad.next_due && s.window && s.window.newest) {
      const ahead = cad.next_due.epoch_s - s.window.newest.epoch_s;
      nextText = ahead > 0 ? "after " + duration(ahead) + " more data" : "due now";
    }
    const nextDetail = [cad.next_due ? "at data time " + timeText(cad.next_due) : null,
      cad.reason ? String(cad.reason) : null, cad.pending ? "another retrain is pending" : null]
      .filter(Boolean).join("; ");
    figs.push(figure("next-retrain", "Next retrain", nextText, cad.next_due ? cad.next_due.epoch_s : null,
      nextDetail || null, null));

    let jobText = "no job yet", jobDetail = null;
    if (job) {
      jobText = String(job.verdict || job.state) + (job.version ? " v" + job.version : "");
      jobDetail = [String(job.outcome || ""), job.trigger ? "trigger: " + job.trigger : null,
        isNum(job.seconds) ? "took " + duration(job.seconds) : null].filter(Boolean).join("; ");
    }
    const jobs = s.jobs || {};
    jobDetail = (jobDetail ? jobDetail + ". " : "") + "Totals: " + (jobs.promoted || 0) + " promoted, " +
      (jobs.rejected || 0) + " rejected, " + (jobs.failed || 0) + " failed";
    figs.push(figure("last-job", "Last retrain job", jobText, job ? job.verdict : null, jobDetail,
      job && job.verdict && job.verdict !== "promoted" ? "alert" : null));

    return el("dl", { class: "figures" }, figs);
  }

  // ---------------------------------------------------------------- plots

  function niceTicks(lo, hi, count) {
    const span = hi - lo;
    if (!(span > 0)) return [lo];
    const rough = span / count;
    const mag = Math.pow(10, Math.floor(Math.log10(rough)));
    const norm = rough / mag;
    const step = (norm < 1.5 ? 1 : norm < 3 ? 2 : norm < 7 ? 5 : 10) * mag;
    const ticks = [];
    for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) ticks.push(Math.abs(v) < step * 1e-9 ? 0 : v);
    return ticks;
  }

  // Splits [x, y] points into runs without missing values.
  function runs(points) {
    const out = [];
    let cur = [];
    for (const p of points) {
      if (isNum(p[0]) && isNum(p[1])) cur.push(p);
      else if (cur.length) { out.push(cur); cur = []; }
    }
    if (cur.length) out.push(cur);
    return out;
  }

  function renderPlots(r) {
    const f = r.feed;
    const s = r.status;
    const box = el("div", { class: "plot-area" });
    const count = s && s.window ? s.window.samples : (f.window ? f.window.samples : 0);
    if (!count || r.newest === null) {
      box.appendChild(el("p", { class: "note strong", "data-field": "no-data",
        text: "No data yet: nothing has been received for this feed." }));
      return box;
    }
    if (r.errors.samples) {
      box.appendChild(el("p", { class: "note strong", text: "Could not read the samples: " + errText(r.errors.samples) }));
    }
    const model = s ? s.model : f.model;
    if (!model) {
      box.appendChild(el("p", { class: "note strong", "data-field": "no-model", text: "No model yet, so no forecast: " +
        "the first model is trained once the window holds enough data" +
        (s && s.cadence && s.cadence.reason ? " (" + String(s.cadence.reason) + ")." : ".") }));
    } else if (r.errors.forecast) {
      box.appendChild(el("p", { class: "note strong", text: "No forecast: " + errText(r.errors.forecast) }));
    }
    const fc = r.forecast;
    if (fc && typeof fc.advisory === "string") box.appendChild(el("p", { class: "note", text: fc.advisory }));

    const samples = Array.isArray(r.samples) ? r.samples : [];
    const anySuspect = samples.some((x) => x.suspect && typeof x.suspect === "object");
    box.appendChild(el("div", { class: "legend" },
      el("span", {}, el("span", { class: "key observed" }), "observed"),
      anySuspect ? el("span", {}, el("span", { class: "key suspect", text: "×" }),
        "suspect reading, not used (at the plot's edge when off scale)") : null,
      fc ? el("span", {}, el("span", { class: "key forecast" }), "forecast (model v" + fc.model_version + ")") : null,
      fc ? el("span", {}, el("span", { class: "key beyond" }), "forecast past the horizon") : null,
      fc ? el("span", {}, el("span", { class: "key horizon" }), "predictability horizon") : null));

    const plots = el("div", { class: "plots" });
    const channels = Array.isArray(f.channels) ? f.channels : [];
    channels.forEach((ch, i) => plots.appendChild(renderChannel(r, ch, i, samples, fc)));
    box.appendChild(plots);
    return box;
  }

  const W = 1000, H = 210, ML = 78, MR = 18, MT = 14, MB = 34;

  function renderChannel(r, ch, i, samples, fc) {
    const newest = r.newest;
    const observed = samples.map((x) => [x.t.epoch_s - newest, Array.isArray(x.values) ? x.values[i] : null]);
    // Suspect readings (values has null there): [x, raw reading as the API
    // gives it, a number or "inf"/"-inf"/"nan"]. Not in the y range, so a
    // -9999 sentinel cannot flatten the real data.
    const suspect = [];
    for (const x of samples) {
      if (x.suspect && typeof x.suspect === "object" && Object.prototype.hasOwnProperty.call(x.suspect, ch.name)) {
        suspect.push([x.t.epoch_s - newest, x.suspect[ch.name]]);
      }
    }
    const within = [], beyond = [];
    let horizonX = null;
    if (fc && Array.isArray(fc.points)) {
      const from = fc.from.epoch_s - newest;
      within.push([from, Array.isArray(fc.start) ? fc.start[i] : null]);
      let last = within[0];
      for (const p of fc.points) {
        const pt = [p.t.epoch_s - newest, Array.isArray(p.values) ? p.values[i] : null];
        if (p.beyond_horizon) {
          if (beyond.length === 0 && last) beyond.push(last);  // continue the line across the horizon
          beyond.push(pt);
        } else {
          within.push(pt);
          last = pt;
        }
      }
      if (fc.horizon && isNum(fc.horizon.seconds)) horizonX = from + fc.horizon.seconds;
    }

    // Axes: x over everything drawn; y over the observed data and the forecast
    // within the horizon (a diverging free run past it must not flatten the rest).
    const xs = [], ys = [];
    for (const p of observed.concat(within, beyond)) if (isNum(p[0])) xs.push(p[0]);
    for (const p of observed.concat(within)) if (isNum(p[1])) ys.push(p[1]);
    if (ys.length === 0) for (const p of beyond) if (isNum(p[1])) ys.push(p[1]);
    let x0 = xs.length ? Math.min(...xs) : -1, x1 = xs.length ? Math.max(...xs) : 0;
    if (!(x1 > x0)) { x0 -= 1; x1 += 1; }
    let y0 = ys.length ? Math.min(...ys) : -1, y1 = ys.length ? Math.max(...ys) : 1;
    if (!(y1 > y0)) { const pad = Math.abs(y0) * 0.1 || 1; y0 -= pad; y1 += pad; }
    const ypad = (y1 - y0) * 0.08;
    y0 -= ypad; y1 += ypad;
    const px = (x) => ML + (x - x0) / (x1 - x0) * (W - ML - MR);
    const py = (y) => MT + (y1 - y) / (y1 - y0) * (H - MT - MB);

    const clipId = "clip-" + r.feed.id + "-" + i;
    const plot = svg("svg", { class: "plot", viewBox: "0 0 " + W + " " + H, role: "img",
      "aria-label": ch.name + ": observed and forecast", "data-channel": ch.name });
    plot.appendChild(svg("defs", {}, svg("clipPath", { id: clipId },
      svg("rect", { x: ML, y: MT, width: W - ML - MR, height: H - MT - MB }))));

    for (const t of niceTicks(y0, y1, 4)) {
      const y = py(t).toFixed(1);
      plot.appendChild(svg("line", { class: "grid", x1: ML, x2: W - MR, y1: y, y2: y }));
      plot.appendChild(svg("text", { class: "axis-label", x: ML - 8, y: (py(t) + 4).toFixed(1), "text-anchor": "end", text: num(t) }));
    }
    for (const t of niceTicks(x0, x1, 8)) {
      const x = px(t).toFixed(1);
      plot.appendChild(svg("line", { class: "grid", x1: x, x2: x, y1: MT, y2: H - MB }));
      plot.appendChild(svg("text", { class: "axis-label", x: x, y: H - MB + 18, "text-anchor": "middle",
        text: (t > 0 ? "+" : "") + num(t) + " s" }));
    }
    plot.appendChild(svg("line", { class: "now", x1: px(0).toFixed(1), x2: px(0).toFixed(1), y1: MT, y2: H - MB }));

    const g = svg("g", { "clip-path": "url(#" + clipId + ")" });
    const line = (series, cls, pts) => {
      for (const run of runs(pts)) {
        if (run.length < 2 && series !== "observed") continue;
        g.appendChild(svg("polyline", { class: cls, "data-series": series, "data-channel": ch.name,
          "data-points": run.length, points: run.map((p) => px(p[0]).toFixed(1) + "," + py(p[1]).toFixed(1)).join(" ") }));
      }
    };
    line("observed", "observed", observed);
    line("forecast", "forecast", within);
    line("beyond", "beyond", beyond);
    plot.appendChild(g);

    // A cross per suspect reading, at its value when on scale, otherwise
    // pinned to the top or bottom edge; its tooltip gives the raw reading.
    for (const [x, rawValue] of suspect) {
      if (!isNum(x) || x < x0 || x > x1) continue;
      const low = isNum(rawValue) ? rawValue < y0 : rawValue === "-inf";
      const yv = isNum(rawValue) ? clamp(rawValue, y0, y1) : (low ? y0 : y1);
      const cx = px(x), cy = clamp(py(yv), MT + 5, H - MB - 5);
      plot.appendChild(svg("path", { class: "suspect", "data-series": "suspect", "data-channel": ch.name,
        "data-raw": raw(rawValue),
        d: "M" + (cx - 5).toFixed(1) + " " + (cy - 5).toFixed(1) + "l10 10m0 -10l-10 10" },
        svg("title", { text: "suspect reading " + raw(rawValue) + " at " + (x > 0 ? "+" : "") + num(x) + " s" })));
    }

    if (horizonX !== null && horizonX >= x0 && horizonX <= x1) {
      const x = px(horizonX).toFixed(1);
      plot.appendChild(svg("line", { class: "horizon", "data-mark": "horizon", "data-seconds": fc.horizon.seconds,
        x1: x, x2: x, y1: MT, y2: H - MB }));
      const right = px(horizonX) > W - 200;
      plot.appendChild(svg("text", { class: "horizon-label", x: px(horizonX) + (right ? -6 : 6), y: MT + 14,
        "text-anchor": right ? "end" : "start", text: "horizon " + duration(fc.horizon.seconds) }));
    }

    const unit = ch.unit ? String(ch.unit) : "";
    const head = el("p", { class: "plot-title" }, String(ch.name),
      unit ? el("span", { class: "unit", text: " [" + unit + "]" }) : el("span", { class: "unit", text: " (no unit given)" }));
    if (fc && horizonX !== null && horizonX > x1) {
      head.appendChild(el("span", { class: "unit", text: " — horizon " + duration(fc.horizon.seconds) + " lies past the plotted forecast" }));
    }
    // The sensor screen's count for this channel since the daemon started
    // (status `suspect`), with the newest suspect reading.
    const sc = r.status && r.status.suspect ? r.status.suspect[ch.name] : null;
    if (sc && sc.count > 0) {
      head.appendChild(el("span", { class: "suspect-note", "data-field": "suspect", "data-channel": ch.name,
        "data-value": sc.count, text: " × " + sc.count + " suspect reading" + (sc.count === 1 ? "" : "s") +
          ", the last " + raw(sc.last_value) + " at " + timeText(sc.last) + "; not trained on or forecast from" }));
    }
    return el("div", { class: "plot-box" }, head, plot);
  }

  // ---------------------------------------------------------------- models

  function renderModels(r) {
    if (r.errors.models) return el("p", { class: "note strong", text: "Could not read the model history: " + errText(r.errors.models) });
    const models = r.models && Array.isArray(r.models.models) ? r.models.models : [];
    if (models.length === 0) return el("p", { class: "note", "data-field": "no-models", text: "No model versions yet." });
    const head = el("tr", {}, ["version", "status", "origin", "created (UTC)", "trained on data", "validation error", "parent", "reason"]
      .map((h) => el("th", { scope: "col", text: h })));
    const rows = models.map((m) => el("tr", { "data-version": m.version, "data-status": m.status },
      el("td", { class: "num", text: "v" + m.version }),
      el("td", { class: "status-word", text: String(m.status) }),
      el("td", { "data-field": "origin", text: String(m.origin || "trained") }),
      el("td", { text: String(m.created_at || "—").replace("T", " ").replace("Z", "") }),
      el("td", { text: timeText(m.trained_from) + " → " + timeText(m.trained_to) }),
      el("td", { class: "num", text: num(m.validation_error) }),
      el("td", { class: "num", text: m.parent ? "v" + m.parent : "—" }),
      el("td", { text: String(m.reason || "") })));
    return el("table", { class: "models", "data-field": "models" }, el("thead", {}, head), el("tbody", {}, rows));
  }

  // ---------------------------------------------------------------- start

  function start() {
    $("auth-form").addEventListener("submit", (ev) => {
      ev.preventDefault();
      const input = $("auth-token");
      const value = input.value.trim();
      input.value = "";
      if (!value) return;
      setToken(value);
      authShown = false;
      $("auth").hidden = true;
      setConn("starting", "Connecting…");
      poll();
    });
    $("forget-token").addEventListener("click", () => {
      setToken(null);
      $("feeds").replaceChildren();
      sections.clear();
      poll();
    });
    document.addEventListener("visibilitychange", () => {
      if (document.hidden) {
        clearTimeout(timer);
        timer = null;
        if (!authShown) setConn("paused", "Paused (tab hidden)");
      } else {
        poll();
      }
    });
    poll();
  }

  if (document.readyState === "loading") document.addEventListener("DOMContentLoaded", start);
  else start();
})();
