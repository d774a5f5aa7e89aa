// The blind test page: /compare/{id}. An ES module, no build step; the shared header,
// palette and token prompt come from chrome.js and base.css, like every page.
//
// Every label of a trial (A, B and maybe X) is decoded into one AudioBuffer; all of them
// play at once from one AudioContext start time, each through its own gain, and
// "switching" only moves those gains (a few-ms ramp), so the position never jumps and
// nothing clicks. Playback starts 20 dB down. The page learns nothing about which
// variant is behind a label: the server sends labels and opaque audio URLs only.
//
// The A/B preference design shows A and B only (no X) and takes a "no preference" answer
// (choice "none"); ABX shows A, B and X and is forced choice.
import { api, ApiError } from "./api.js";
import { askToken, mountChrome, setTitle } from "./chrome.js";

/** The answer that says "no preference" (A/B design only; ABX is forced choice). */
const NO_PREFERENCE = "none";

{
  const SWITCH_TAU_S = 0.003;     // gain ramp time constant when switching (3 ms)
  const TRANSPORT_RAMP_S = 0.008; // fade in/out on play and stop (8 ms)
  const START_DELAY_S = 0.05;     // schedule ahead so every source starts on the same frame
  const POLL_MS = 400;

  const $ = (id) => document.getElementById(id);
  const id = location.pathname.split("/").filter(Boolean).pop();
  const state = {
    session: null, trial: null, buffers: {}, active: "A", ctx: null, master: null,
    transport: null, gains: {}, sources: [], playing: false, startedAt: 0, startedPos: 0,
    duration: 0, busy: false,
  };

  /** GET/POST through api.js (token, problem details); a 401 waits for a token, then retries. */
  async function call(path, options = {}) {
    try {
      return await api(path, options);
    } catch (err) {
      if (err instanceof ApiError && err.status === 401) {
        await askToken();
        return call(path, options);
      }
      throw err;
    }
  }

  function showError(err) {
    const box = $("error");
    box.textContent = String(err && err.message ? err.message : err);
    box.hidden = false;
  }

  function clearError() { $("error").hidden = true; }

  // ---------------------------------------------------------------------- audio graph

  function ensureContext() {
    if (state.ctx) return state.ctx;
    const ctx = new AudioContext();
    state.ctx = ctx;
    state.master = ctx.createGain();
    state.master.gain.value = dbToGain(Number($("volume").value));
    state.master.connect(ctx.destination);
    state.transport = ctx.createGain();
    state.transport.gain.value = 0;
    state.transport.connect(state.master);
    return ctx;
  }

  function dbToGain(db) { return Math.pow(10, db / 20); }

  function labels() { return state.trial ? state.trial.labels : []; }

  function position() {
    if (!state.playing) return state.startedPos;
    let pos = state.startedPos + Math.max(0, state.ctx.currentTime - state.startedAt);
    const loop = loopRegion();
    if (loop && pos >= loop.end) pos = loop.start + ((pos - loop.start) % (loop.end - loop.start));
    return Math.min(pos, state.duration);
  }

  function loopRegion() {
    if (!$("loop-on").checked) return null;
    const start = Math.max(0, Number($("loop-start").value) || 0);
    const end = Math.min(state.duration, Number($("loop-end").value) || state.duration);
    return end - start >= 0.1 ? { start, end } : null;
  }

  function startSources(pos) {
    const ctx = ensureContext();
    stopSources(false);
    const loop = loopRegion();
    if (loop && (pos < loop.start || pos >= loop.end)) pos = loop.start;
    if (pos >= state.duration) pos = 0;
    const when = ctx.currentTime + START_DELAY_S;
    state.sources = labels().map((label) => {
      const src = ctx.createBufferSource();
      src.buffer = state.buffers[label];
      if (loop) { src.loop = true; src.loopStart = loop.start; src.loopEnd = loop.end; }
      src.connect(state.gains[label]);
      src.start(when, pos);
      return src;
    });
    // Only the first source reports the end: they all end on the same frame.
    state.sources[0].onended = () => { if (state.sources[0] && state.playing && !loopRegion()) stop(true); };
    state.transport.gain.cancelScheduledValues(when);
    state.transport.gain.setValueAtTime(0, when);
    state.transport.gain.linearRampToValueAtTime(1, when + TRANSPORT_RAMP_S);
    state.startedAt = when;
    state.startedPos = pos;
    state.playing = true;
    renderTransport();
  }

  function stopSources(fade) {
    const ctx = state.ctx;
    const old = state.sources;
    state.sources = [];
    if (!ctx || !old.length) return;
    const t = ctx.currentTime;
    if (fade) {
      state.transport.gain.cancelScheduledValues(t);
      state.transport.gain.setValueAtTime(state.transport.gain.value, t);
      state.transport.gain.linearRampToValueAtTime(0, t + TRANSPORT_RAMP_S);
    }
    for (const src of old) {
      src.onended = null;
      try { src.stop(fade ? t + TRANSPORT_RAMP_S + 0.002 : t); } catch (e) { /* not started */ }
    }
  }

  function play() {
    if (!state.trial || state.busy) return;
    const ctx = ensureContext();
    if (ctx.state === "suspended") ctx.resume();
    startSources(state.startedPos);
  }

  function stop(atEnd) {
    const pos = atEnd ? 0 : position();
    stopSources(true);
    state.playing = false;
    state.startedPos = pos;
    renderTransport();
  }

  function seek(pos) {
    pos = Math.max(0, Math.min(pos, state.duration));
    if (state.playing) startSources(pos);
    else { state.startedPos = pos; renderTransport(); }
  }

  function select(label) {
    if (!labels().includes(label)) return;
    state.active = label;
    if (state.ctx) {
      const t = state.ctx.currentTime;
      for (const l of labels()) {
        const g = state.gains[l].gain;
        g.cancelScheduledValues(t);
        g.setValueAtTime(g.value, t);
        g.setTargetAtTime(l === label ? 1 : 0, t, SWITCH_TAU_S);
      }
    }
    for (const btn of $("sources").querySelectorAll("button")) {
      btn.setAttribute("aria-pressed", String(btn.dataset.label === label));
    }
    document.body.dataset.active = label;
  }

  // --------------------------------------------------------------------------- trials

  async function loadTrial(trial) {
    state.busy = true;
    setAnswersEnabled(false);
    if (state.playing) stop(false);
    const ctx = ensureContext();
    const decoded = {};
    await Promise.all(trial.labels.map(async (label) => {
      const resp = await call(trial.audio[label]);
      decoded[label] = await ctx.decodeAudioData(await resp.arrayBuffer());
    }));
    for (const g of Object.values(state.gains)) g.disconnect();
    state.gains = {};
    for (const label of trial.labels) {
      const g = ctx.createGain();
      g.gain.value = 0;
      g.connect(state.transport);
      state.gains[label] = g;
    }
    state.trial = trial;
    state.buffers = decoded;
    state.duration = Math.min(...trial.labels.map((l) => decoded[l].duration));
    state.startedPos = 0;
    const loopEnd = $("loop-end");
    if (!Number(loopEnd.value) || Number(loopEnd.value) > state.duration) {
      loopEnd.value = state.duration.toFixed(1);
    }
    buildTrialControls(trial);
    select("A");
    state.busy = false;
    setAnswersEnabled(true);
    document.body.dataset.trial = String(trial.index);
    document.body.dataset.state = "listening";
    renderTransport();
  }

  function isAb() { return state.session && state.session.mode === "ab"; }

  /** The answer buttons: A/B preference has "no preference" too; ABX is forced choice. */
  function answerChoices() {
    if (!isAb()) return [["A", "X is A", "1"], ["B", "X is B", "2"]];
    return [["A", "I prefer A", "1"], ["B", "I prefer B", "2"], [NO_PREFERENCE, "No preference", "N"]];
  }

  function kbd(text) {
    const k = document.createElement("kbd");
    k.textContent = text;
    return k;
  }

  function buildTrialControls(trial) {
    const s = state.session;
    $("trial-label").textContent = `Trial ${trial.index + 1} of ${s.trial_count}`;
    $("trial-bar").max = s.trial_count;
    $("trial-bar").value = s.answered;
    // Only the labels the trial has: A and B in the A/B design, A, B and X in ABX.
    $("sources").replaceChildren(...trial.labels.map((label) => {
      const b = document.createElement("button");
      b.type = "button";
      b.className = "btn";
      b.dataset.label = label;
      b.textContent = label;
      b.title = `Listen to ${label} (key ${label})`;
      b.setAttribute("aria-keyshortcuts", label);
      b.addEventListener("click", () => select(label));
      return b;
    }));
    $("answers").replaceChildren(...answerChoices().map(([choice, text, key]) => {
      const b = document.createElement("button");
      b.type = "button";
      b.className = choice === NO_PREFERENCE ? "btn btn-none" : "btn btn-primary";
      b.dataset.choice = choice;
      b.setAttribute("aria-keyshortcuts", key);
      b.append(`${text} `, kbd(key));
      b.addEventListener("click", () => answer(choice));
      return b;
    }));
    const keys = $("keys");
    keys.replaceChildren("Keys: ", ...trial.labels.flatMap((l) => [kbd(l), " "]), "listen · ",
      kbd("Space"), " play or stop · ", kbd("L"), " loop · ", kbd("["), " ", kbd("]"), " loop from / to here · ",
      kbd("1"), " ", kbd("2"), isAb() ? " prefer A or B · " : " X is A or B · ",
      ...(isAb() ? [kbd("N"), " no preference · "] : []),
      kbd("←"), " ", kbd("→"), " move 2 s");
  }

  function setAnswersEnabled(on) {
    for (const b of $("answers").querySelectorAll("button")) b.disabled = !on;
  }

  async function answer(choice) {
    if (!state.trial || state.busy) return;
    if (choice === NO_PREFERENCE && !isAb()) return;
    state.busy = true;
    setAnswersEnabled(false);
    try {
      const view = await call(`/v1/comparisons/${id}/trials/${state.trial.index}/answer`, {
        method: "POST", json: { choice },
      });
      clearError();
      state.busy = false;
      await show(view);
    } catch (err) {
      state.busy = false;
      setAnswersEnabled(true);
      if (choice === NO_PREFERENCE && err.status === 422) {
        showError("This server does not take a “no preference” answer yet: choose A or B.");
      } else {
        showError(err);
      }
    }
  }

  async function finishEarly() {
    if (!confirm("Stop now? The unanswered trials stay unanswered and the results open.")) return;
    try {
      await show(await call(`/v1/comparisons/${id}/finish`, { method: "POST" }));
    } catch (err) { showError(err); }
  }

  // -------------------------------------------------------------------------- screens

  async function show(session) {
    state.session = session;
    document.body.dataset.mode = session.mode;
    $("question").textContent = session.question;
    const design = session.mode === "abx" ? "ABX" : "A/B preference";
    $("heading").textContent = `Blind test · ${design}`;
    setTitle(`Blind test (${design})`);
    if (session.stem_id) $("back").href = `/#stem=${session.stem_id}&tab=blind`;
    $("preparing").hidden = session.state !== "preparing";
    $("listening").hidden = session.state !== "ready";
    $("results").hidden = session.state !== "finished";
    if (session.state === "preparing") {
      document.body.dataset.state = "preparing";
      $("prep-bar").value = session.progress;
      $("prep-text").textContent =
        `Preparing the excerpts… ${Math.round(session.progress * 100)} %`;
      setTimeout(refresh, POLL_MS);
    } else if (session.state === "failed") {
      document.body.dataset.state = "failed";
      showError("The comparison could not be prepared: " + (session.message || "unknown reason"));
    } else if (session.state === "ready") {
      await loadTrial(session.trials[session.next_trial]);
    } else if (session.state === "finished") {
      if (state.playing) stop(false);
      await showResults();
    }
  }

  async function refresh() {
    try {
      const view = await call(`/v1/comparisons/${id}`);
      clearError();
      await show(view);
    } catch (err) {
      showError(err.status === 404 ? "There is no such blind test (it may have been deleted)." : err);
      document.body.dataset.state = "failed";
    }
  }

  function cell(row, text, cls) {
    const td = document.createElement("td");
    td.textContent = text;
    if (cls) td.className = cls;
    row.appendChild(td);
  }

  function fmt(v, unit) {
    return v === null || v === undefined ? "–" : `${v.toFixed(1).replace(/^-/, "−")} ${unit}`;
  }

  function describe(request) {
    return Object.entries(request).filter(([, v]) => v !== null && v !== "none" && v !== 0)
      .map(([k, v]) => `${k.replaceAll("_", " ")}: ${typeof v === "object" ? JSON.stringify(v) : v}`)
      .join(", ") || "defaults";
  }

  /** How the results count "no preference" answers (the server says it in `ties`). */
  function noneRule(r, ties) {
    const plain = `${ties} “no preference” answer${ties === 1 ? "" : "s"}. How they count: as answered ` +
      "trials, but left out of each variant's “chosen” count and of the sign test (the p value), " +
      "which uses only the trials with a preference; dropping ties is common practice for a sign test.";
    return typeof r.ties === "string" && r.ties ? `${plain} The results file says: ${r.ties}.` : plain;
  }

  async function showResults() {
    const r = await call(`/v1/comparisons/${id}/results`);
    state.results = r;
    const names = r.variants.map((v) => v.name);
    const ties = Number.isInteger(r.no_preference) ? r.no_preference
      : r.trials.filter((t) => t.answer === NO_PREFERENCE).length;
    if (r.mode === "abx") {
      const p = r.abx.p_value;
      $("summary").textContent = `${r.abx.correct} correct of ${r.abx.answered} answered ` +
        `(${r.trial_count} trials). Chance of doing this well by guessing: p = ${p.toFixed(3)}` +
        (p < 0.05 ? ": you heard a difference." : ": not enough to tell a difference apart from guessing.");
      $("none-rule").hidden = true;
    } else {
      const best = r.variants.slice().sort((a, b) => b.preferred - a.preferred)[0];
      $("summary").textContent = `${r.answered} of ${r.trial_count} trials answered` +
        (ties ? `, ${ties} of them with no preference` : "") + ". " +
        (best && best.preferred ? `Most often chosen: ${best.name} (${best.preferred} of ${best.answered_trials} times heard).`
          : "No variant was preferred.") +
        (r.preference_p_value !== undefined && r.preference_p_value !== null
          ? ` Two-sided p = ${r.preference_p_value.toFixed(3)}.` : "");
      const rule = $("none-rule");
      rule.textContent = noneRule(r, ties);
      rule.hidden = false;
    }
    $("summary").insertAdjacentText("beforeend", ` All excerpts matched to ${fmt(r.level_lufs, "LUFS")}.`);
    $("variant-table").querySelector("tbody").replaceChildren(...r.variants.map((v) => {
      const tr = document.createElement("tr");
      cell(tr, v.name); cell(tr, describe(v.request));
      cell(tr, fmt(v.measured_lufs, "LUFS"), "num");
      cell(tr, `${v.gain_db >= 0 ? "+" : ""}${fmt(v.gain_db, "dB")}`, "num");
      cell(tr, `${fmt(v.matched_lufs, "LUFS")}, ${fmt(v.matched_true_peak_dbtp, "dBTP")}`, "num");
      cell(tr, r.mode === "abx" ? "–" : `${v.preferred} of ${v.answered_trials}` +
        (v.no_preference ? ` (${v.no_preference} no preference)` : ""), "num");
      return tr;
    }));
    $("trial-table").querySelector("tbody").replaceChildren(...r.trials.map((t) => {
      const tr = document.createElement("tr");
      cell(tr, String(t.index + 1));
      cell(tr, names[t.variants.A]); cell(tr, names[t.variants.B]);
      cell(tr, t.variants.X === undefined ? "" : names[t.variants.X], "col-x");
      const answered = t.answer !== null && t.answer !== undefined;
      cell(tr, !answered ? "not answered" : t.answer === NO_PREFERENCE ? "no preference" : t.answer);
      let outcome = "";
      if (answered && r.mode === "abx") outcome = t.correct ? "right" : "wrong";
      else if (t.answer === NO_PREFERENCE) outcome = "counted apart (a tie)";
      else if (answered && names[t.preferred_variant] !== undefined) outcome = `chose ${names[t.preferred_variant]}`;
      cell(tr, outcome);
      return tr;
    }));
    document.body.dataset.state = "results";
  }

  async function save(format) {
    try {
      const resp = await call(`/v1/comparisons/${id}/results?format=${format}`);
      const blob = format === "json" ? new Blob([JSON.stringify(resp, null, 2)], { type: "application/json" })
        : await resp.blob();
      const url = URL.createObjectURL(blob);
      const a = document.createElement("a");
      a.href = url;
      a.download = `comparison-${id}.${format}`;
      document.body.appendChild(a);
      a.click();
      a.remove();
      setTimeout(() => URL.revokeObjectURL(url), 1000);
    } catch (err) { showError(err); }
  }

  // ------------------------------------------------------------------ transport view

  function renderTransport() {
    $("play").firstChild.textContent = state.playing ? "Stop " : "Play ";
    $("dur").textContent = state.duration.toFixed(1);
    $("seek").max = String(state.duration || 1);
    document.body.dataset.playing = String(state.playing);
  }

  function tick() {
    if (state.trial) {
      const pos = position();
      $("pos").textContent = pos.toFixed(1);
      if (document.activeElement !== $("seek")) $("seek").value = String(pos);
    }
    requestAnimationFrame(tick);
  }

  function restartIfPlaying() { if (state.playing) startSources(position()); }

  // ---------------------------------------------------------------------- wiring

  mountChrome({ title: "Blind test", current: "" });
  $("play").addEventListener("click", () => (state.playing ? stop(false) : play()));
  $("seek").addEventListener("change", () => seek(Number($("seek").value)));
  $("loop-on").addEventListener("change", restartIfPlaying);
  $("loop-start").addEventListener("change", restartIfPlaying);
  $("loop-end").addEventListener("change", restartIfPlaying);
  $("loop-here-start").addEventListener("click", () => { $("loop-start").value = position().toFixed(1); restartIfPlaying(); });
  $("loop-here-end").addEventListener("click", () => { $("loop-end").value = position().toFixed(1); restartIfPlaying(); });
  $("volume").addEventListener("input", () => {
    const db = Number($("volume").value);
    $("volume-out").textContent = `${db.toString().replace("-", "−")} dB`;
    if (state.master) state.master.gain.setTargetAtTime(dbToGain(db), state.ctx.currentTime, 0.01);
  });
  $("finish").addEventListener("click", finishEarly);
  $("export-json").addEventListener("click", () => save("json"));
  $("export-csv").addEventListener("click", () => save("csv"));

  document.addEventListener("keydown", (ev) => {
    if (ev.target.closest("input, textarea, select, dialog") || ev.ctrlKey || ev.metaKey || ev.altKey) return;
    if (!state.trial || $("listening").hidden) return;
    const key = ev.key;
    const upper = key.length === 1 ? key.toUpperCase() : key;
    if (labels().includes(upper)) { select(upper); ev.preventDefault(); }
    else if (key === " ") { state.playing ? stop(false) : play(); ev.preventDefault(); }
    else if (upper === "L") { $("loop-on").checked = !$("loop-on").checked; restartIfPlaying(); }
    else if (key === "1") answer("A");
    else if (key === "2") answer("B");
    else if (upper === "N" && isAb()) answer(NO_PREFERENCE);
    else if (key === "ArrowLeft") seek(position() - 2);
    else if (key === "ArrowRight") seek(position() + 2);
    else if (key === "[") $("loop-here-start").click();
    else if (key === "]") $("loop-here-end").click();
  });

  // For tests and the curious: the page's audio state, read-only.
  window.earfoldListening = {
    gains: () => Object.fromEntries(Object.entries(state.gains).map(([l, g]) => [l, g.gain.value])),
    position, active: () => state.active, playing: () => state.playing,
    sourceCount: () => state.sources.length, master: () => state.master && state.master.gain.value,
  };

  requestAnimationFrame(tick);
  refresh();
}
