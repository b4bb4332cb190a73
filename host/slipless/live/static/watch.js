/* slipless watch page: draws each snapshot the server pushes over /ws.
   Plots are made once per key and then fed with setData; every part copes with
   empty arrays, nulls and missing sections, and a part that fails to draw is
   counted (window.sliplessWatch.errors) without stopping the others. */
(function () {
  "use strict";

  const watch = window.sliplessWatch = {updates: 0, alarms: [], errors: 0};
  const INK = {
    axis: "#4a5260", grid: "#e6e1d6", line: "#0f6d6a", band: "rgba(15, 109, 106, 0.22)",
    rail: "#b0412e", coil: "#6a3fb5", loss: "#b0412e", angle: "rgba(176, 65, 46, 0.75)",
    clock: "#2d5ea8", battery: "#1f6f43", temp: "#a8326e",
  };
  const RETRY_FIRST_MS = 250;  // first retry after a close; doubles up to RETRY_LAST_MS
  const RETRY_LAST_MS = 5000;
  const HISTORY = 8;  // cleared alarms kept on screen
  const PLOT_HEIGHT = 150;
  const LEVEL_WORD = {alarm: "alarm", warn: "warning"};
  const COIL_WORD = {"1": "+1", "0": "off", "-1": "\u22121"};

  const plots = new Map();  // key -> {u: uPlot, el: where it lives}
  const streamCards = new Map();  // stream id -> its card's parts
  const activeSeen = new Map();  // alarm id -> the alarm as last seen active
  let cleared = [];  // alarms that left the snapshot while active, newest first
  let connected = false;
  let retryMs = RETRY_FIRST_MS;
  let retryTimer = null;

  const $ = (id) => document.getElementById(id);
  const arr = (v) => (Array.isArray(v) ? v : []);
  const isNum = (v) => typeof v === "number" && isFinite(v);

  function guard(part, fn) {
    try {
      fn();
    } catch (e) {
      watch.errors += 1;
      console.error("watch: drawing " + part + " failed:", e);
    }
  }

  // ---- text ---------------------------------------------------------------
  function num(v, unit) {
    if (!isNum(v)) return "\u2013";
    const a = Math.abs(v);
    const s = a !== 0 && (a >= 1e5 || a < 1e-3) ? v.toExponential(2) : String(Number(v.toPrecision(4)));
    return unit ? s + " " + unit : s;
  }
  function fixed(v, digits, unit) {
    if (!isNum(v)) return "\u2013";
    return v.toFixed(digits) + (unit ? " " + unit : "");
  }
  function count(v) {
    return isNum(v) ? Math.round(v).toLocaleString("en") : "\u2013";
  }
  function clockText(s) {
    if (!isNum(s)) return "\u2013";
    const t = Math.max(0, s);
    const h = Math.floor(t / 3600);
    const m = Math.floor((t % 3600) / 60);
    const sec = (t % 60).toFixed(1).padStart(4, "0");
    return h > 0 ? h + ":" + String(m).padStart(2, "0") + ":" + sec : m + ":" + sec;
  }
  function spanText(s) {
    if (!isNum(s)) return "\u2013";
    return s < 60 ? s.toFixed(1) + " s" : clockText(s);
  }
  function setText(id, text) {
    const el = $(id);
    if (el.textContent !== text) el.textContent = text;
  }
  function make(tag, cls, text) {
    const el = document.createElement(tag);
    if (cls) el.className = cls;
    if (text !== undefined) el.textContent = text;
    return el;
  }

  // ---- plots ----------------------------------------------------------------
  function axis(label, extra) {
    return Object.assign({
      label: label, labelSize: 16, labelFont: "11px system-ui, sans-serif", font: "11px system-ui, sans-serif",
      stroke: INK.axis, grid: {stroke: INK.grid, width: 1}, ticks: {stroke: INK.grid, width: 1},
    }, extra || {});
  }
  function line(label, stroke, extra) {
    return Object.assign({label: label, stroke: stroke, width: 1.5, points: {show: false},
                          value: (u, v) => num(v)}, extra || {});
  }
  function options(series, yLabel, extra, xSeries) {
    const x = xSeries || {label: "t", value: (u, v) => num(v, "s")};
    return Object.assign({
      width: 360, height: PLOT_HEIGHT,
      scales: {x: {time: false}},
      cursor: {drag: {x: false, y: false}},  // each update rescales: a zoom would not last
      legend: {show: true, live: true},
      axes: [axis("run time (s)"), axis(yLabel)],
      series: [x].concat(series),
    }, extra || {});
  }
  function widthOf(el) {
    return Math.max(220, Math.floor(el.clientWidth || (el.parentNode && el.parentNode.clientWidth) || 360));
  }
  function plot(key, el, makeOptions, data) {
    let p = plots.get(key);
    if (p === undefined) {
      const opts = makeOptions();
      opts.width = widthOf(el);
      p = {u: new uPlot(opts, data, el), el: el};
      plots.set(key, p);
    } else {
      p.u.setData(data);
    }
    return p;
  }
  function columns(lists) {
    // uPlot wants equal lengths, numbers or null, and a number for every x: make it so,
    // whatever arrives (a row without its x is left out)
    const n = Math.min.apply(null, lists.map((a) => a.length));
    const clean = lists.map((a) => {
      const b = a.length === n ? a : a.slice(0, n);
      return b.every((v) => v === null || isNum(v)) ? b : b.map((v) => (isNum(v) ? v : null));
    });
    if (clean[0].every(isNum)) return clean;
    const keep = [];
    clean[0].forEach((v, i) => { if (isNum(v)) keep.push(i); });
    return clean.map((a) => keep.map((i) => a[i]));
  }
  function zeroBased(u, min, max) {
    const top = isNum(max) && max > 0 ? max * 1.1 : 1;
    return [0, top];
  }
  function resizeAll() {
    for (const p of plots.values()) {
      guard("resize", () => p.u.setSize({width: widthOf(p.el), height: PLOT_HEIGHT}));
    }
  }

  // ---- top bar --------------------------------------------------------------
  function drawBar(snap) {
    if (typeof snap.title === "string" && snap.title) {
      setText("title", snap.title);
      if (document.title !== snap.title) document.title = snap.title;
    }
    const link = snap.link || {};
    const up = link.up === true;
    const parts = [up ? "UP" : "DOWN"];
    if (link.state) parts.push(String(link.state));
    if (link.why) parts.push(String(link.why));
    if (isNum(link.since_s) && isNum(snap.now_s)) parts.push("for " + spanText(snap.now_s - link.since_s));
    setText("link", parts.join(" \u00b7 "));
    $("link").className = "state " + (up ? "up" : "down");
    const totals = snap.totals || {};
    setText("frames", count(totals.frames));
    setText("missing", count(totals.missing));
    setText("loss", fixed(totals.loss_pct, 2, "%"));
    setText("resent", count(totals.resent));
    setText("samples", count(totals.samples));
    setText("watch-time", clockText(snap.now_s));
    setText("speed", isNum(snap.speed) ? "replay \u00d7" + num(snap.speed) : "live");
  }

  // ---- alarms ---------------------------------------------------------------
  function alarmRow(a, now_s) {
    const li = make("li", "alarm level-" + (a.level === "alarm" ? "alarm" : "warn"));
    li.dataset.alarmId = String(a.id);
    li.appendChild(make("span", "level", LEVEL_WORD[a.level] || String(a.level || "note")));
    li.appendChild(make("span", "text", String(a.text || a.id)));
    let when = "since " + clockText(a.since_s);
    if (a.active && isNum(now_s) && isNum(a.since_s)) when += " (" + spanText(now_s - a.since_s) + ")";
    if (!a.active) when = "from " + clockText(a.since_s) + (isNum(a.cleared_s) ? " to " + clockText(a.cleared_s) : "");
    li.appendChild(make("span", "since", when));
    return li;
  }
  function drawAlarms(snap) {
    const all = arr(snap.alarms).filter((a) => a && a.id !== undefined && a.id !== null);
    const inSnap = new Set(all.map((a) => String(a.id)));
    for (const [id, a] of activeSeen) {
      if (!inSnap.has(id)) {  // gone from the snapshot while active: it cleared now
        cleared.unshift(Object.assign({}, a, {active: false, cleared_s: snap.now_s}));
        activeSeen.delete(id);
      }
    }
    const active = all.filter((a) => a.active === true);
    for (const a of all) {
      if (a.active === true) activeSeen.set(String(a.id), a);
      else activeSeen.delete(String(a.id));
    }
    cleared = cleared.filter((a) => !inSnap.has(String(a.id)));
    const history = all.filter((a) => a.active !== true).concat(cleared).slice(0, HISTORY);
    $("alarm-list").replaceChildren.apply($("alarm-list"), active.map((a) => alarmRow(a, snap.now_s)));
    $("alarm-history").replaceChildren.apply($("alarm-history"), history.map((a) => alarmRow(a, snap.now_s)));
    $("no-alarms").classList.toggle("hidden", active.length > 0);
    document.querySelector(".history-h").classList.toggle("hidden", history.length === 0);
    watch.alarms = active.map((a) => String(a.id));
  }

  // ---- streams --------------------------------------------------------------
  function streamCard(id) {
    const card = make("figure", "card");
    card.dataset.stream = id;
    const head = make("figcaption", "card-head");
    const name = make("span", "name");
    const unit = make("span", "unit");
    const meta = make("span", "meta");
    const rail = make("span", "badge rail hidden", "near rail");
    const gone = make("span", "badge gone hidden", "no data now");
    const last = make("span", "last");
    head.append(name, unit, meta, rail, gone, last);
    const el = make("div", "plot");
    el.dataset.plot = "stream:" + id;
    card.append(head, el);
    $("stream-grid").appendChild(card);
    const parts = {card: card, name: name, unit: unit, meta: meta, rail: rail, gone: gone, last: last, el: el};
    streamCards.set(id, parts);
    return parts;
  }
  function drawStream(s) {
    const id = String(s.id);
    const c = streamCards.get(id) || streamCard(id);
    const unit = s.unit ? String(s.unit) : "";
    c.name.textContent = String(s.name || "stream " + s.stream);
    c.unit.textContent = unit ? "(" + unit + ")" : "";
    c.meta.textContent = "board " + s.board + " \u00b7 run " + s.run + " \u00b7 stream " + s.stream +
      (isNum(s.rate_hz) ? " \u00b7 " + num(s.rate_hz, "Hz") : "");
    c.last.textContent = "last " + num(s.last, unit);
    const near = s.near_rail === true;
    c.card.classList.toggle("near-rail", near);
    c.rail.classList.toggle("hidden", !near);
    c.card.classList.remove("gone");
    c.gone.classList.add("hidden");
    const [t, lo, hi] = columns([arr(s.t_s), arr(s.lo), arr(s.hi)]);
    // the rails are drawn (and set the scale) only once the data comes within a quarter
    // of full scale of one: far from them they would flatten the trace to a line
    let rails = Array.isArray(s.rails) && isNum(s.rails[0]) && isNum(s.rails[1]) ? s.rails : [];
    if (rails.length && !near) {
      const quarter = (rails[1] - rails[0]) / 4;
      const top = Math.max(...hi.filter(isNum)), bottom = Math.min(...lo.filter(isNum));
      if (!(top >= rails[1] - quarter || bottom <= rails[0] + quarter)) rails = [];
    }
    const railLo = t.map(() => (isNum(rails[0]) ? rails[0] : null));
    const railHi = t.map(() => (isNum(rails[1]) ? rails[1] : null));
    plot("stream:" + id, c.el, () => options([
      line("min", INK.line, {width: 1}),
      line("max", INK.line, {width: 1}),
      line("rail low", INK.rail, {width: 1, dash: [6, 4]}),
      line("rail high", INK.rail, {width: 1, dash: [6, 4]}),
    ], unit, {bands: [{series: [2, 1], fill: INK.band}]}), [t, lo, hi, railLo, railHi]);
  }
  function drawStreams(snap) {
    const now = new Set();
    for (const s of arr(snap.streams)) {
      if (!s || s.id === undefined || s.id === null) continue;
      now.add(String(s.id));
      guard("stream " + s.id, () => drawStream(s));
    }
    for (const [id, c] of streamCards) {  // a stream that stopped keeps its plot, marked
      const missing = !now.has(id);
      c.card.classList.toggle("gone", missing);
      c.gone.classList.toggle("hidden", !missing);
    }
    $("no-streams").classList.toggle("hidden", streamCards.size > 0);
  }

  // ---- coil -----------------------------------------------------------------
  function latestStreamTime(snap, board, run) {
    let latest = null;
    for (const s of arr(snap.streams)) {
      if (!s || s.board !== board || s.run !== run) continue;
      const t = arr(s.t_s);
      const v = t[t.length - 1];
      if (isNum(v) && (latest === null || v > latest)) latest = v;
    }
    return latest;
  }
  function drawCoil(snap) {
    const coils = arr(snap.coil).filter((c) => c && typeof c === "object");
    for (const c of coils) guard("coil " + c.board, () => drawOneCoil(snap, c));
    $("no-coil").classList.toggle("hidden", $("coil-grid").children.length > 0);
  }
  function drawOneCoil(snap, c) {
    const key = "coil:" + c.board + "." + c.run;
    let el = document.querySelector('[data-plot="' + CSS.escape(key) + '"]');
    if (el === null) {
      const card = make("figure", "card");
      card.appendChild(make("figcaption", "", "coil of board " + c.board + ", run " + c.run));
      el = make("div", "plot");
      el.dataset.plot = key;
      card.appendChild(el);
      $("coil-grid").appendChild(card);
    }
    let [t, st] = columns([arr(c.t_s), arr(c.state)]);
    // a state holds until the next change: carry the last one to the newest sample seen
    const end = latestStreamTime(snap, c.board, c.run);
    if (t.length > 0 && end !== null && end > t[t.length - 1]) {
      t = t.concat([end]);
      st = st.concat([st[st.length - 1]]);
    }
    plot(key, el, () => options([
      line("coil", INK.coil, {width: 2, paths: uPlot.paths.stepped({align: 1}),
                              value: (u, v) => (v === null || v === undefined ? "\u2013" : COIL_WORD[v] || String(v))}),
    ], "state", {
      scales: {x: {time: false}, y: {range: [-1.3, 1.3]}},
      axes: [axis("run time (s)"), axis("state", {splits: () => [-1, 0, 1],
                                                  values: (u, vals) => vals.map((v) => COIL_WORD[v] || "")})],
    }), [t, st]);
  }

  // ---- link: loss, loss by angle, clock ------------------------------------------
  function drawLoss(snap) {
    const ls = snap.loss_series || {};
    plot("loss", document.querySelector('[data-plot="loss"]'), () => options(
      [line("lost", INK.loss, {value: (u, v) => fixed(v, 2, "%")})], "%",
      {scales: {x: {time: false}, y: {range: zeroBased}},
       axes: [axis("watch time (s)"), axis("%")]}),
    columns([arr(ls.t_s), arr(ls.loss_pct)]));
  }
  function drawAngle(snap) {
    const a = snap.angle;
    const el = document.querySelector('[data-plot="angle"]');
    const has = a !== null && typeof a === "object";
    $("no-angle").classList.toggle("hidden", has);
    el.classList.toggle("hidden", !has);
    if (!has) {
      setText("angle-bin", "");
      return;
    }
    const [deg, pct] = columns([arr(a.deg), arr(a.loss_pct)]);
    const total = (key) => arr(a[key]).reduce((s, v) => s + (isNum(v) ? v : 0), 0);
    const lost = total("lost"), resent = total("resent"), seen = total("seen");
    // a bar: frames the link failed the first time (still missing, or resent) in that bin
    setText("angle-bin", (isNum(a.bin_deg) ? num(a.bin_deg) + "\u00b0 bins, " : "") +
      count(lost + resent) + " of " + count(lost + seen) + " frames failed first time (" +
      count(resent) + " resent, " + count(lost) + " missing)");
    plot("angle", el, () => options([
      line("failed", INK.angle, {fill: INK.angle, width: 1, paths: uPlot.paths.bars({size: [0.85, Infinity]}),
                               value: (u, v) => fixed(v, 1, "%")}),
    ], "%", {
      scales: {x: {time: false, range: [0, 360]}, y: {range: zeroBased}},
      axes: [axis("rotor angle (\u00b0)", {splits: () => [0, 90, 180, 270, 360],
                                          values: (u, vals) => vals.map((v) => v + "\u00b0")}), axis("%")],
    }, {label: "angle", value: (u, v) => num(v, "\u00b0")}), [deg, pct]);
  }
  function drawClock(snap) {
    const c = snap.clock || {};
    plot("clock", document.querySelector('[data-plot="clock"]'), () => options(
      [line("offset", INK.clock, {value: (u, v) => num(v, "ms")})], "ms",
      {axes: [axis("watch time (s)"), axis("ms")]}),
    columns([arr(c.t_s), arr(c.offset_ms)]));
  }

  // ---- boards ---------------------------------------------------------------
  function boardRow(b) {
    const tr = make("tr");
    tr.dataset.board = b.board + "." + b.run;
    const cells = [count(b.board), count(b.run), b.fw ? String(b.fw) : "\u2013", fixed(b.battery_v, 2, "V"),
                   fixed(b.temp_c, 1, "\u00b0C"), count(b.dropped), count(b.late), count(b.queue_high),
                   isNum(b.free_ram) ? count(b.free_ram) + " B" : "\u2013"];
    for (const text of cells) tr.appendChild(make("td", "", text));
    return tr;
  }
  function drawBoards(snap) {
    const boards = arr(snap.boards).filter((b) => b && typeof b === "object");
    const body = document.querySelector("#board-table tbody");
    body.replaceChildren.apply(body, boards.map(boardRow));
    $("board-table").classList.toggle("hidden", boards.length === 0);
    $("no-boards").classList.toggle("hidden", boards.length > 0);
    for (const b of boards) {
      guard("board " + b.board, () => {
        const key = "board:" + b.board + "." + b.run;
        let el = document.querySelector('[data-plot="' + CSS.escape(key) + '"]');
        if (el === null) {
          const card = make("figure", "card");
          card.appendChild(make("figcaption", "", "board " + b.board + ", run " + b.run +
                                ": battery (V) and temperature (\u00b0C)"));
          el = make("div", "plot");
          el.dataset.plot = key;
          card.appendChild(el);
          $("board-grid").appendChild(card);
        }
        plot(key, el, () => options([
          line("battery", INK.battery, {scale: "V", value: (u, v) => fixed(v, 2, "V")}),
          line("temperature", INK.temp, {scale: "C", value: (u, v) => fixed(v, 1, "\u00b0C")}),
        ], "V", {
          scales: {x: {time: false}},
          axes: [axis("watch time (s)"), axis("V", {scale: "V"}),
                 axis("\u00b0C", {scale: "C", side: 1, grid: {show: false}})],
        }), columns([arr(b.t_s), arr(b.battery_series_v), arr(b.temp_series_c)]));
      });
    }
  }

  // ---- one snapshot -----------------------------------------------------------
  function draw(snap) {
    if (snap === null || typeof snap !== "object") {
      watch.errors += 1;
      console.error("watch: a snapshot that is not an object");
      return;
    }
    if (snap.v !== 1) setConn(true, "snapshot version " + snap.v + " is newer than this page: showing what it can");
    guard("top bar", () => drawBar(snap));
    guard("alarms", () => drawAlarms(snap));
    guard("streams", () => drawStreams(snap));
    guard("coil", () => drawCoil(snap));
    guard("loss", () => drawLoss(snap));
    guard("angle", () => drawAngle(snap));
    guard("clock", () => drawClock(snap));
    guard("boards", () => drawBoards(snap));
    watch.updates += 1;
  }

  // ---- the socket -----------------------------------------------------------
  function setConn(on, text) {
    connected = on;
    const el = $("conn");
    el.className = "conn " + (on ? "on" : "off");
    el.textContent = text || (on ? "connected" : "waiting for the recorder");
    const stale = !on && watch.updates > 0;  // the figures shown are the last ones received
    $("main").classList.toggle("stale", stale);
    $("bar").classList.toggle("stale", stale);
  }
  function retryLater() {
    if (retryTimer !== null) return;
    const wait = retryMs * (0.8 + 0.4 * Math.random());  // spread the retries of many pages
    retryMs = Math.min(RETRY_LAST_MS, retryMs * 2);
    setConn(false, "waiting for the recorder (next try in " + (wait / 1000).toFixed(1) + " s)");
    retryTimer = setTimeout(connect, wait);
  }
  function connect() {
    retryTimer = null;
    let ws;
    try {
      ws = new WebSocket((location.protocol === "https:" ? "wss://" : "ws://") + location.host + "/ws");
    } catch (e) {
      retryLater();
      return;
    }
    ws.onopen = () => {
      retryMs = RETRY_FIRST_MS;
      setConn(true);
    };
    ws.onmessage = (ev) => {
      let snap;
      try {
        snap = JSON.parse(ev.data);
      } catch (e) {
        watch.errors += 1;
        console.error("watch: a snapshot that is not JSON:", e);
        return;
      }
      draw(snap);
    };
    ws.onclose = () => {
      if (connected) setConn(false);
      retryLater();
    };
  }

  let resizeTimer = null;
  window.addEventListener("resize", () => {
    clearTimeout(resizeTimer);
    resizeTimer = setTimeout(resizeAll, 150);
  });
  setConn(false);
  connect();
})();
