// The run page: one server-sent-event stream updates everything; controls post requests.
(function () {
  "use strict";
  var run = window.NIGHTBENCH_RUN;
  var base = "/api/runs/" + encodeURIComponent(run);
  function $(id) { return document.getElementById(id); }
  function text(id, value) { var el = $(id); if (el) { el.textContent = value; } }
  function duration(s) {
    if (s === null || s === undefined || isNaN(s)) { return "-"; }
    s = Math.max(0, Math.round(s));
    var h = Math.floor(s / 3600), m = Math.floor((s % 3600) / 60), r = s % 60;
    return h + ":" + String(m).padStart(2, "0") + ":" + String(r).padStart(2, "0");
  }
  function fmt(v) {
    if (v === null || v === undefined) { return "-"; }
    if (typeof v === "number") { return Math.abs(v) >= 1000 ? v.toFixed(0) : String(+v.toPrecision(5)); }
    if (typeof v === "boolean") { return v ? "yes" : "no"; }
    if (typeof v === "object") { return Object.keys(v).map(function (k) { return k + " " + fmt(v[k]); }).join(", "); }
    return String(v);
  }
  var chartTimes = [], chartSource = [], chartReference = [];
  function updateChart(readings, clock) {
    if (!window.Plotly || !$("chart")) { return; }
    var bb = readings.blackbody || {};
    if (bb.temperature_c === undefined) { return; }
    chartTimes.push(clock); chartSource.push(bb.temperature_c); chartReference.push(bb.reference_c);
    if (chartTimes.length > 2000) { chartTimes.shift(); chartSource.shift(); chartReference.shift(); }
    Plotly.react("chart", [
      {x: chartTimes.map(function (t) { return new Date(t * 1000); }), y: chartSource, name: "source (C)", mode: "lines"},
      {x: chartTimes.map(function (t) { return new Date(t * 1000); }), y: chartReference, name: "reference (C)", mode: "lines"}
    ], {height: 240, margin: {t: 10, b: 30, l: 50, r: 10}, yaxis: {title: "C"}});
  }
  function showStatus(msg) {
    var st = msg.status || {}, pr = msg.progress || {};
    text("state", msg.state || st.state || "-");
    text("cause", st.cause ? "(" + st.cause + ")" : "");
    text("step", st.steps_total ? st.step_index + " of " + st.steps_total + "  " + st.step_id : "-");
    text("step-source", st.step_source || "");
    text("description", st.description || "");
    var pct = Math.round(100 * (pr.fraction || 0));
    text("percent", pct + " %");
    $("bar-fill").style.width = pct + "%";
    text("elapsed", duration(pr.elapsed_s) + (st.simulated ? " (simulated)" : ""));
    text("left", duration(pr.left_s) + (st.simulated ? " (simulated)" : ""));
    text("end", pr.expected_end_wall ? new Date(pr.expected_end_wall * 1000).toLocaleTimeString() : "-");
    $("stale").hidden = !pr.stale;
    var body = $("readings").querySelector("tbody");
    body.innerHTML = "";
    var readings = st.readings || {};
    // one text per instrument, with units, formatted by the station as on its own screen
    (msg.reading_lines || []).forEach(function (pair) {
      var tr = document.createElement("tr");
      var a = document.createElement("td"); a.textContent = pair[0];
      var b = document.createElement("td"); b.textContent = pair[1];
      tr.appendChild(a); tr.appendChild(b); body.appendChild(tr);
    });
    var bb = readings.blackbody || {};
    if (bb.temperature_c !== undefined && bb.reference_c !== undefined) {
      var diff = bb.temperature_c - bb.reference_c;
      var want = bb.mode === "difference" ? diff : bb.temperature_c;
      var tol = /tolerance=([0-9.eE+-]+)/.exec(st.description || "");
      var line = "difference " + diff.toFixed(3) + " K";
      if (bb.setpoint !== undefined) {
        var err = want - bb.setpoint;
        line += "; off its setpoint by " + (1000 * err).toFixed(0) + " mK" +
          (tol ? " (tolerance " + (1000 * parseFloat(tol[1])).toFixed(0) + " mK)" : "") +
          (bb.stable === undefined ? "" : (bb.stable ? ", settled" : ", settling"));
      }
      var tr = document.createElement("tr");
      var a = document.createElement("td"); a.textContent = "settling";
      var b = document.createElement("td"); b.textContent = line;
      tr.appendChild(a); tr.appendChild(b); body.appendChild(tr);
    }
    updateChart(readings, st.clock_now);
  }
  function showEvents(list) {
    var ol = $("events");
    list.forEach(function (e) {
      var li = document.createElement("li");
      var rest = Object.keys(e).filter(function (k) { return ["seq", "t", "utc", "type"].indexOf(k) < 0; })
        .map(function (k) { return k + "=" + fmt(e[k]); }).join(" ");
      li.textContent = (e.utc || "").slice(11, 19) + " " + e.type + " " + rest.slice(0, 200);
      if (/fault|fail|error|safing|abort/.test(e.type + rest)) { li.className = "bad"; }
      ol.insertBefore(li, ol.firstChild);
    });
    while (ol.children.length > 200) { ol.removeChild(ol.lastChild); }
  }
  function showResults(r) {
    var body = $("verdicts").querySelector("tbody");
    body.innerHTML = "";
    (r.verdicts || []).forEach(function (v) {
      var tr = document.createElement("tr");
      [v.quantity || v.key, fmt(v.value) + (v.sigma !== null && v.sigma !== undefined ? " \u00b1 " + fmt(v.sigma) : "") + " " + (v.unit || ""),
       (v.sense === "min" ? "\u2265 " : "\u2264 ") + fmt(v.limit), fmt(v.margin), v.status].forEach(function (c, i) {
        var td = document.createElement("td"); td.textContent = c; if (i === 4) { td.className = v.status; } tr.appendChild(td);
      });
      body.appendChild(tr);
    });
    text("overall", r.overall ? "UUT " + r.overall : ((r.verdicts || []).length ? "" : "no verdict yet"));
    var s = $("summaries"); s.innerHTML = "";
    Object.keys(r.summaries || {}).forEach(function (name) {
      var p = document.createElement("p");
      p.textContent = name + ": " + fmt(r.summaries[name]).slice(0, 400);
      s.appendChild(p);
    });
  }
  function showPreview(p) {
    if (!p.version) { return; }
    var img = $("preview");
    img.src = base + "/preview.png?v=" + encodeURIComponent(p.version);
    img.hidden = false; $("no-frame").hidden = true;
  }
  var source = new EventSource(base + "/stream");
  source.addEventListener("status", function (e) { showStatus(JSON.parse(e.data)); });
  source.addEventListener("events", function (e) { showEvents(JSON.parse(e.data)); });
  source.addEventListener("results", function (e) { showResults(JSON.parse(e.data)); });
  source.addEventListener("preview", function (e) { showPreview(JSON.parse(e.data)); });
  function control(action, question) {
    if (!window.confirm(question)) { return; }
    var headers = {};
    var tok = $("token");
    if (tok && tok.value) { headers["X-Nightbench-Token"] = tok.value; }
    fetch(base + "/control/" + action, {method: "POST", headers: headers}).then(function (resp) {
      return resp.json().then(function (body) {
        text("control-reply", resp.ok ? action + " requested" : (body.error || ("refused: HTTP " + resp.status)));
      });
    });
  }
  if ($("pause")) {
    $("pause").onclick = function () { control("pause", "Pause the run after the step in progress?"); };
    $("continue").onclick = function () { control("continue", "Continue the run?"); };
    $("abort").onclick = function () { control("abort", "Abort the run? The bench will be safed (source to its safe setpoint, stage parked)."); };
  }
})();
