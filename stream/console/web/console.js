// stopgap operator console page.
//
// Receives the relay's output over WebRTC (one VP8 video track, one
// pre-negotiated data channel "meta", id 0, unordered, no retransmissions)
// and mirrors each frame's state in a banner and a coloured frame. It shows
// STATE UNKNOWN itself when status messages stop for more than
// META_SILENCE_MS ("meta-silent"), the picture stops changing for more than
// VIDEO_FREEZE_MS ("video-frozen"), or a LIVE status gets no newer one
// within STATUS_LATE's limit ("status-late"), so a frozen picture never
// looks live.
//
// LIVE claims the picture is current, so the claim expires on this page's
// clock: STATUS_LATE.intervals tick periods (the status's period_ms, the
// relay's display tick period) after the LIVE status came, clamped to
// [STATUS_LATE.min_ms, STATUS_LATE.max_ms] (the floor when the status gives
// no period). A cut link thus shows STATE UNKNOWN before the relay's next
// tick says PREDICTED, if that tick is late. PREDICTED and STALE do not
// expire this way: they already say the picture is not live. The limits,
// the reasons and their reasoning live in the Go package
// (stream/console/unknown.go); a test holds this page to them.
//
// The bearer token comes from the URL fragment (#token=...), is kept in
// sessionStorage and removed from the address bar.
//
// A tick with no picture has no picture age: NO_PICTURE (no real frame in
// the session yet) says so instead of a number, and NOT_SHOWN (the relay
// decided the tick but put nothing new on screen) gives the age of the
// picture still on screen as a lower bound, counted on the page's clock.
//
// For tests: <body data-state="LIVE|PREDICTED|STALE|NO_PICTURE|NOT_SHOWN|UNKNOWN" data-reason=...>
// and window.__stateLog, one {state, reason, t_ms} entry per change of the
// displayed state or of its reason (t_ms on performance.now());
// window.__console.statusLateAfterMs(period_ms) is the page's limit for a
// LIVE status, which a test compares with the Go side's, and
// window.__console.metaTimes the arrival times of the last (up to 600)
// status messages.
"use strict";
(() => {
  const META_SILENCE_MS = 500;
  const VIDEO_FREEZE_MS = 500;
  // How long a LIVE status stays good without a newer one (console.StatusLateAfterMs).
  const STATUS_LATE = { intervals: 3, min_ms: 100, max_ms: 300 };
  // Why the page shows STATE UNKNOWN (body data-reason), as console.UnknownReasons.
  const REASONS = ["connecting", "no-status", "meta-silent", "video-frozen", "status-late", "bad-state"];
  const WATCH_MS = 50;
  const RECONNECT_MS = 2000;
  // The relay's states, spelled and ordered as display.State (a test
  // checks it against the Go type).
  const STATES = ["LIVE", "PREDICTED", "STALE", "NO_PICTURE", "NOT_SHOWN"];
  // The states whose frame shows a picture, and so has a picture age.
  const PICTURE_STATES = ["LIVE", "PREDICTED", "STALE"];
  // vocab.NoPicture: the words of a tick with no picture (a test checks it).
  const NO_PICTURE = "no picture yet";

  const $ = (id) => document.getElementById(id);
  const body = document.body;
  const video = $("video");

  const stateLog = [];
  window.__stateLog = stateLog;
  // metaTimes: when the last status messages came (page clock), for tests.
  const metaTimes = [];
  window.__console = { meta: null, lastMetaMs: null, metaTimes: metaTimes, statusLateAfterMs: statusLateAfterMs };

  let token = takeToken();
  let shown = "";
  let shownReason = "";
  let lateTimer = 0;
  let last = null;
  let lastPicture = null; // the newest status of a tick that showed a picture
  let lastPictureAt = -Infinity;
  let lastSeq = -1;
  let lastMetaAt = -Infinity;
  let videoFrames = 0;
  let lastVideoAt = -Infinity;
  let limits = { min_cutoff: 0, max_cutoff: 1 };
  let pc = null;
  let resourceURL = null;
  let reconnectTimer = 0;
  let stopped = false;

  function takeToken() {
    let tok = "";
    const m = /(?:^#|&)token=([^&]*)/.exec(location.hash);
    if (m) {
      tok = decodeURIComponent(m[1]);
      try { sessionStorage.setItem("stopgap.token", tok); } catch (e) { /* storage off: keep in memory */ }
      history.replaceState(null, "", location.pathname + location.search);
    } else {
      try { tok = sessionStorage.getItem("stopgap.token") || ""; } catch (e) { tok = ""; }
    }
    return tok;
  }

  function api(path, opts) {
    opts = opts || {};
    const headers = Object.assign({ "Authorization": "Bearer " + token }, opts.headers || {});
    return fetch(path, Object.assign({}, opts, { headers: headers, cache: "no-store" }));
  }

  async function errorText(res) {
    try { const j = await res.json(); if (j && j.error) return j.error; } catch (e) { /* not JSON */ }
    return "HTTP " + res.status;
  }

  function setText(id, text) {
    const el = $(id);
    if (el.textContent !== text) el.textContent = text;
  }

  function setConn(state, detail) {
    body.dataset.conn = state;
    setText("conn", "relay: " + state + (detail ? " (" + detail + ")" : ""));
  }

  const fix = (v, d) => (typeof v === "number" && isFinite(v)) ? v.toFixed(d) : "—";
  const int = (v) => (typeof v === "number" && isFinite(v)) ? String(Math.round(v)) : "—";

  // ---- state display ----

  // statusLateAfterMs is how long a LIVE status with tick period periodMs
  // stays good without a newer one: STATUS_LATE.intervals periods, clamped
  // to [min_ms, max_ms]; min_ms when no usable period is given.
  function statusLateAfterMs(periodMs) {
    if (typeof periodMs !== "number" || !(periodMs > 0) || !isFinite(periodMs)) return STATUS_LATE.min_ms;
    return Math.min(Math.max(STATUS_LATE.intervals * periodMs, STATUS_LATE.min_ms), STATUS_LATE.max_ms);
  }

  function evaluate() {
    const now = performance.now();
    const metaAge = now - lastMetaAt;
    let state = "UNKNOWN";
    let reason = "";
    if (!last && pc && pc.connectionState === "connected") {
      reason = "no-status";
    } else if (!last) {
      reason = "connecting";
    } else if (metaAge > META_SILENCE_MS) {
      reason = "meta-silent";
    } else if (videoFrames > 0 && now - lastVideoAt > VIDEO_FREEZE_MS) {
      reason = "video-frozen";
    } else if (last.state === "LIVE" && metaAge > statusLateAfterMs(last.period_ms)) {
      reason = "status-late";
    } else if (STATES.includes(last.state)) {
      state = last.state;
    } else {
      reason = "bad-state";
    }
    show(state, reason, now, metaAge);
  }

  // staleWhy says why the relay marked a frame STALE (meta.why, the words
  // of predictor.StaleReason).
  function staleWhy(m) {
    switch (m && m.why) {
      case "low-confidence":
        return "confidence " + fix(m.confidence, 2) + " under the cutoff " + fix(m.cutoff, 2);
      case "age-over-cap":
        return "picture age over the cap of " + int(m.max_age_ms) + " ms";
      case "no-motion":
        return "no motion data from the vehicle";
      case "no-picture":
        return "no real picture received yet";
      default:
        return "reason not given";
    }
  }

  // pictureAge returns the age of the real picture on screen: {ms, atLeast},
  // null when there is no picture (no real frame since the session began or
  // since the relay's last NO_PICTURE). It is exact from a status of a state
  // with a picture no older than a LIVE status may get (statusLateAfterMs of
  // its period), whatever its state: a PREDICTED or STALE picture ages too
  // while no newer status comes. Otherwise (NOT_SHOWN, status late or
  // silent) it is a lower bound: that status's age plus the time since it
  // came, on this page's clock.
  function pictureAge(now) {
    if (!lastPicture) return null;
    if (lastPicture === last && now - lastMetaAt <= statusLateAfterMs(last.period_ms)) return { ms: last.age_ms, atLeast: false };
    return { ms: lastPicture.age_ms + (now - lastPictureAt), atLeast: true };
  }

  const ageMs = (a) => (a.atLeast ? "≥ " : "") + int(a.ms) + " ms";

  function show(state, reason, now, metaAge) {
    if (state !== shown || reason !== shownReason) {
      if (state === "UNKNOWN" && !REASONS.includes(reason)) console.error("stopgap console: unlisted reason " + reason);
      shown = state;
      shownReason = reason;
      stateLog.push({ state: state, reason: reason, t_ms: Math.round(now) });
      body.dataset.state = state;
    }
    if (body.dataset.reason !== reason) body.dataset.reason = reason;
    if (body.dataset.videoFrames !== String(videoFrames)) body.dataset.videoFrames = String(videoFrames);
    const pa = pictureAge(now);
    const picAge = "picture age " + (pa ? ageMs(pa) : "—");
    let title, detail, overlay = "";
    switch (state) {
      case "LIVE":
        title = "LIVE";
        detail = "real picture, " + picAge + (videoFrames === 0 ? " (no picture decoded yet)" : "");
        break;
      case "PREDICTED":
        title = "PREDICTED";
        detail = "— synthetic picture, " + picAge + "; moving objects not shown";
        break;
      case "STALE":
        title = "STALE";
        detail = "— " + picAge + "; " + staleWhy(last);
        break;
      case "NO_PICTURE":
        title = "NO_PICTURE";
        detail = "— " + NO_PICTURE + ": the vehicle has sent no real frame in this session";
        overlay = NO_PICTURE;
        break;
      case "NOT_SHOWN":
        title = "NOT_SHOWN";
        detail = "— this tick could not be put on screen; " +
          (pa ? "the picture before it stays, " + picAge : NO_PICTURE);
        break;
      default:
        title = "STATE UNKNOWN";
        overlay = title;
        switch (reason) {
          case "meta-silent":
            detail = "— no status from the relay for " + int(metaAge) + " ms; treat the picture as unknown";
            break;
          case "status-late":
            detail = "— no status for " + int(metaAge) + " ms after a live frame; treat the picture as unknown";
            break;
          case "video-frozen":
            detail = "— the picture stopped changing " + int(now - lastVideoAt) + " ms ago; treat it as unknown";
            break;
          case "bad-state":
            detail = "— the relay sent a state this page does not know";
            break;
          case "no-status":
            detail = "— connected, waiting for the first status message";
            break;
          case "connecting":
          default:
            detail = "— connecting to the relay; treat any picture as unknown";
        }
    }
    setText("banner-title", title);
    setText("overlay", overlay);
    setText("banner-detail", detail);
    setText("v-state", state === "UNKNOWN" ? "STATE UNKNOWN" : state);
    setText("v-why", state === "STALE" ? staleWhy(last) : "—");
    if (last) {
      setText("v-age", pa ? ageMs(pa) : "none, " + NO_PICTURE);
      setText("v-maxage", int(last.max_age_ms));
    }
    setText("v-msgage", isFinite(metaAge) ? int(metaAge) : "—");
  }

  function onMeta(data) {
    if (typeof data !== "string") data = new TextDecoder().decode(data);
    let m;
    try { m = JSON.parse(data); } catch (e) { return; }
    if (!m || typeof m !== "object" || typeof m.seq !== "number") return;
    // unordered channel: keep only newer messages (a big step back is a relay restart)
    if (lastSeq >= 0 && m.seq <= lastSeq && lastSeq - m.seq < 1000) return;
    lastSeq = m.seq;
    last = m;
    lastMetaAt = performance.now();
    if (PICTURE_STATES.includes(m.state)) {
      lastPicture = m;
      lastPictureAt = lastMetaAt;
    } else if (m.state === "NO_PICTURE") {
      lastPicture = null;
    }
    window.__console.meta = m;
    window.__console.lastMetaMs = lastMetaAt;
    metaTimes.push(lastMetaAt);
    if (metaTimes.length > 600) metaTimes.splice(0, 100);
    // A LIVE status expires on this page's clock: look again the moment it
    // does, not at the next watchdog round (WATCH_MS later at worst).
    clearTimeout(lateTimer);
    if (m.state === "LIVE") lateTimer = setTimeout(evaluate, statusLateAfterMs(m.period_ms) + 1);
    setText("v-conf", fix(m.confidence, 2));
    setText("v-cutoff", fix(m.cutoff, 2));
    setText("v-profile", typeof m.profile === "string" ? m.profile : "—");
    const l = m.link || {};
    if (l.no_packets_ms > 0) {
      // a silent link has no loss or jitter to show: say how long it has been silent
      setText("l-loss", "no packets for " + int(l.no_packets_ms) + " ms");
      setText("l-jitter", "—");
    } else {
      setText("l-loss", fix(l.loss_pct, 1) + " %");
      setText("l-jitter", int(l.jitter_ms) + " ms");
    }
    setText("l-delay", int(l.delay_ms));
    setText("l-kf", int(l.keyframe_requests));
    setText("l-frames", int(l.frames_in));
    evaluate();
  }

  function onVideoFrame() {
    videoFrames++;
    lastVideoAt = performance.now();
    video.requestVideoFrameCallback(onVideoFrame);
  }
  if ("requestVideoFrameCallback" in HTMLVideoElement.prototype) {
    video.requestVideoFrameCallback(onVideoFrame);
  } else {
    let seen = 0;
    setInterval(() => {
      const q = video.getVideoPlaybackQuality ? video.getVideoPlaybackQuality().totalVideoFrames : 0;
      if (q !== seen) { seen = q; videoFrames = q; lastVideoAt = performance.now(); }
    }, WATCH_MS);
  }

  // ---- WebRTC ----

  function gatheringDone(p, ms) {
    return new Promise((resolve) => {
      if (p.iceGatheringState === "complete") return resolve();
      const t = setTimeout(resolve, ms);
      p.addEventListener("icegatheringstatechange", () => {
        if (p.iceGatheringState === "complete") { clearTimeout(t); resolve(); }
      });
    });
  }

  function hangUp() {
    if (resourceURL) {
      api(resourceURL, { method: "DELETE", keepalive: true }).catch(() => {});
      resourceURL = null;
    }
    if (pc) { pc.close(); pc = null; }
  }

  function scheduleReconnect() {
    if (stopped) return;
    clearTimeout(reconnectTimer);
    reconnectTimer = setTimeout(connect, RECONNECT_MS);
  }

  async function connect() {
    hangUp();
    // a new connection may reach a restarted relay whose seq starts again
    clearTimeout(lateTimer);
    last = null;
    lastPicture = null;
    lastSeq = -1;
    if (!token) {
      setConn("error", "no token: open the console with the URL that ends in #token=…");
      return;
    }
    setConn("connecting");
    const p = new RTCPeerConnection({ iceServers: [] });
    pc = p;
    p.addTransceiver("video", { direction: "recvonly" });
    const dc = p.createDataChannel("meta", { negotiated: true, id: 0, ordered: false, maxRetransmits: 0 });
    dc.onmessage = (ev) => onMeta(ev.data);
    p.ontrack = (ev) => {
      video.srcObject = ev.streams[0] || new MediaStream([ev.track]);
      video.play().catch(() => {});
    };
    p.onconnectionstatechange = () => {
      if (p !== pc) return;
      setConn(p.connectionState);
      if (p.connectionState === "failed" || p.connectionState === "closed") scheduleReconnect();
    };
    try {
      await p.setLocalDescription(await p.createOffer());
      await gatheringDone(p, 2000);
      const res = await api("/api/view", {
        method: "POST", headers: { "Content-Type": "application/sdp" }, body: p.localDescription.sdp,
      });
      if (res.status === 401) {
        stopped = true;
        throw new Error(await errorText(res));
      }
      if (res.status !== 201) throw new Error(await errorText(res));
      resourceURL = res.headers.get("Location");
      await p.setRemoteDescription({ type: "answer", sdp: await res.text() });
    } catch (e) {
      setConn("error", e.message);
      if (p === pc) { p.close(); pc = null; }
      scheduleReconnect();
    }
  }

  // ---- cutoff control ----

  const range = $("cutoff-range");
  const number = $("cutoff-number");
  const select = $("profile");

  function cutoffMessage(text, isError) {
    setText("cutoff-msg", text);
    if (isError) body.dataset.cutoffError = text; else delete body.dataset.cutoffError;
  }

  function applyControlState(st) {
    limits = st.limits;
    for (const el of [range, number]) {
      el.min = String(limits.min_cutoff);
      el.max = String(limits.max_cutoff);
    }
    range.value = String(st.cutoff);
    number.value = st.cutoff.toFixed(2);
    select.replaceChildren(...st.profiles.map((p) => {
      const o = document.createElement("option");
      o.value = p.name;
      o.textContent = p.name + " (" + p.cutoff.toFixed(2) + ")";
      o.selected = p.name === st.profile;
      return o;
    }));
    setText("limits", "administrator limits: " + limits.min_cutoff.toFixed(2) + " – " + limits.max_cutoff.toFixed(2));
    body.dataset.cutoff = String(st.cutoff);
    body.dataset.profile = st.profile;
    body.dataset.minCutoff = String(limits.min_cutoff);
    body.dataset.maxCutoff = String(limits.max_cutoff);
  }

  async function loadState() {
    if (!token) return;
    try {
      const res = await api("/api/state");
      if (!res.ok) { cutoffMessage(await errorText(res), true); return; }
      applyControlState(await res.json());
    } catch (e) {
      cutoffMessage("cannot read the control state: " + e.message, true);
    }
  }

  async function postCutoff(req) {
    try {
      const res = await api("/api/cutoff", {
        method: "POST", headers: { "Content-Type": "application/json" }, body: JSON.stringify(req),
      });
      if (!res.ok) { cutoffMessage(await errorText(res), true); return; }
      const st = await res.json();
      applyControlState(st);
      cutoffMessage("profile " + st.profile + " in use, cutoff " + st.cutoff.toFixed(2), false);
    } catch (e) {
      cutoffMessage("not applied: " + e.message, true);
    }
  }

  range.addEventListener("input", () => { number.value = Number(range.value).toFixed(2); });
  number.addEventListener("input", () => {
    const v = Number(number.value);
    if (number.value !== "" && v >= limits.min_cutoff && v <= limits.max_cutoff) range.value = String(v);
  });
  select.addEventListener("change", () => postCutoff({ profile: select.value }));
  $("cutoff-apply").addEventListener("click", () => {
    const text = number.value.trim();
    const v = Number(text);
    if (text === "" || !isFinite(v)) {
      cutoffMessage("enter a number between " + limits.min_cutoff.toFixed(2) + " and " + limits.max_cutoff.toFixed(2), true);
    } else if (v < limits.min_cutoff) {
      cutoffMessage(text + " is below the administrator's minimum " + limits.min_cutoff.toFixed(2) + "; not applied", true);
    } else if (v > limits.max_cutoff) {
      cutoffMessage(text + " is above the administrator's maximum " + limits.max_cutoff.toFixed(2) + "; not applied", true);
    } else {
      postCutoff({ profile: select.value, cutoff: v });
    }
  });

  window.addEventListener("pagehide", () => { stopped = true; hangUp(); });
  setInterval(evaluate, WATCH_MS);
  evaluate();
  loadState();
  connect();
})();
