/* levgap report: the table of every firm of the reported year, drawn from embedded data.
   The data (report/universe.py) is gzip-compressed JSON in base64; only the rows of the current
   page and the firms opened are drawn. Text from the data is set with textContent only.
   Location hash: #q=TEXT searches, #open=FIRM_ID opens a firm, #measure=market switches. */
(function () {
  "use strict";
  var root = document.getElementById("universe");
  if (!root) { return; }
  var blob = document.getElementById("u-data");
  var L = JSON.parse(document.getElementById("u-labels").textContent);
  var PAGE = 50;
  var DIGITS = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-_";
  var VALUE = {};
  for (var i = 0; i < DIGITS.length; i++) { VALUE[DIGITS.charAt(i)] = i; }
  var NS = "http://www.w3.org/2000/svg";

  function unpack(text) {
    var out = [], u = 0, shift = 0;
    for (var i = 0; i < text.length; i++) {
      var d = VALUE[text.charAt(i)];
      u += (d & 31) * Math.pow(2, shift);
      if (d & 32) { shift += 5; continue; }
      out.push(u === 0 ? null : ((u - 1) % 2 === 0 ? (u - 1) / 2 : -u / 2));
      u = 0; shift = 0;
    }
    return out;
  }
  function cumulate(deltas, lengths) {
    var out = new Array(deltas.length), at = 0;
    for (var r = 0; r < lengths.length; r++) {
      var level = 0;
      for (var j = 0; j < lengths[r]; j++, at++) {
        level = (j === 0 ? 0 : level) + (deltas[at] === null ? NaN : deltas[at]);
        out[at] = level;
      }
    }
    return out;
  }
  function el(tag, cls, text) {
    var e = document.createElement(tag);
    if (cls) { e.className = cls; }
    if (text !== undefined && text !== null) { e.textContent = String(text); }
    return e;
  }
  function svg(tag, attrs) {
    var e = document.createElementNS(NS, tag);
    for (var k in attrs) { if (attrs.hasOwnProperty(k)) { e.setAttribute(k, attrs[k]); } }
    return e;
  }
  function fixed(v, digits) {
    var s = v.toFixed(digits);
    return /^-0(\.0*)?$/.test(s) ? s.slice(1) : s;  // no negative zero
  }
  function pct(v) { return v === null || isNaN(v) ? "–" : fixed(v / 10, 1) + "%"; }
  function pp(v) {
    if (v === null || isNaN(v)) { return "–"; }
    var s = fixed(v / 10, 1);
    return (v > 0 && s !== "0.0" ? "+" : "") + s;
  }
  function signed(v, scale, digits) {
    if (v === null || isNaN(v)) { return "–"; }
    var s = fixed(v / scale, digits);
    return (v > 0 && !/^0\.?0*$/.test(s) ? "+" : "") + s;
  }
  function money(v) {
    if (v === null || isNaN(v)) { return "–"; }
    var s = signed(v, 10, 1), neg = s.charAt(0) === "-", plus = s.charAt(0) === "+";
    var body = neg || plus ? s.slice(1) : s, parts = body.split(".");
    parts[0] = parts[0].replace(/\B(?=(\d{3})+(?!\d))/g, ",");
    return (neg ? "-" : plus ? "+" : "") + parts.join(".");
  }

  function decode(b64) {
    var bin = atob(b64.trim()), bytes = new Uint8Array(bin.length);
    for (var i = 0; i < bin.length; i++) { bytes[i] = bin.charCodeAt(i); }
    var stream = new Blob([bytes]).stream().pipeThrough(new DecompressionStream("gzip"));
    return new Response(stream).text().then(JSON.parse);
  }

  function prepare(D) {
    D.fvals = unpack(D.fv);
    D.firmIndex = unpack(D.firmInd);
    D.rawAt = {};
    for (var i = 0; i < D.raw.length; i += 2) { D.rawAt[D.raw[i]] = D.raw[i + 1]; }
    D.lower = D.names.map(function (n, i) { return (D.ids[i] + " " + n).toLowerCase(); });
    Object.keys(D.m).forEach(function (name) {
      var m = D.m[name], keys = ["a", "t", "g", "po", "lo", "hi", "z", "debt", "pm", "pt", "pc", "yo", "gp",
        "st", "fl", "c", "pv", "hn", "hy", "ha", "ht", "hl", "hh", "hs"];
      keys.forEach(function (k) { m[k] = unpack(m[k]); });
      var deltas = unpack(m.row), at = -1;
      m.row = deltas.map(function (d) { at += d; return at; });
      m.hya = cumulate(m.hy, m.hn);
      m.haa = cumulate(m.ha, m.hn);
      m.hta = cumulate(m.ht, m.hn);
      m.hstart = [];
      var s = 0;
      for (var r = 0; r < m.hn.length; r++) { m.hstart.push(s); s += m.hn[r]; }
      m.n = m.row.length;
      m.fvOver = {};
      for (var o = 0; o < (m.fo || []).length; o += 2) { m.fvOver[m.fo[o]] = m.fo[o + 1]; }
    });
    return D;
  }

  var state = { measure: null, q: "", ind: "", status: "", persistent: false, fresh: false,
                key: "z", dir: -1, page: 0, open: {} };
  var D = null, shown = [];

  function has(flags, code) { return (";" + flags + ";").indexOf(";" + code + ";") >= 0; }
  function value(m, r, key) {
    var f = m.row[r];
    switch (key) {
      case "firm": return D.ids[f].toLowerCase();
      case "name": return D.names[f].toLowerCase();
      case "industry": return D.ind[D.firmIndex[f]].toLowerCase();
      case "gap": return m.g[r];
      default: return m[key][r];
    }
  }

  function filter() {
    var m = D.m[state.measure], q = state.q.trim().toLowerCase(), out = [];
    for (var r = 0; r < m.n; r++) {
      var f = m.row[r], flags = D.flags[m.fl[r]];
      if (q && D.lower[f].indexOf(q) < 0) { continue; }
      if (state.ind !== "" && String(D.firmIndex[f]) !== state.ind) { continue; }
      if (state.status !== "" && String(m.st[r]) !== state.status) { continue; }
      if (state.persistent && !has(flags, "persistent")) { continue; }
      if (state.fresh && !has(flags, "newly_outside")) { continue; }
      out.push(r);
    }
    var key = state.key, dir = state.dir;
    var size = key === "z" || key === "gap" || key === "debt";
    out.sort(function (x, y) {
      var a = value(m, x, key), b = value(m, y, key);
      if (size) { a = a === null ? null : Math.abs(a); b = b === null ? null : Math.abs(b); }
      if (a === b) { return D.ids[m.row[x]] < D.ids[m.row[y]] ? -1 : 1; }
      if (a === null || (typeof a === "number" && isNaN(a))) { return 1; }
      if (b === null || (typeof b === "number" && isNaN(b))) { return -1; }
      return (a < b ? -1 : 1) * dir;
    });
    shown = out;
  }

  function cell(tr, text, cls, title) {
    var td = el("td", cls, text);
    if (title) { td.title = title; }
    tr.appendChild(td);
    return td;
  }

  function render() {
    var m = D.m[state.measure], body = root.querySelector("#u-table tbody");
    while (body.firstChild) { body.removeChild(body.firstChild); }
    var pages = Math.max(1, Math.ceil(shown.length / PAGE));
    state.page = Math.min(state.page, pages - 1);
    var from = state.page * PAGE, to = Math.min(shown.length, from + PAGE);
    for (var i = from; i < to; i++) {
      var r = shown[i], f = m.row[r], tr = el("tr", "firm");
      tr.setAttribute("data-firm", D.ids[f]);
      var who = cell(tr, "", "name");
      who.appendChild(el("strong", null, D.ids[f]));
      if (D.names[f]) { who.appendChild(document.createTextNode(" ")); who.appendChild(el("span", "small", D.names[f])); }
      var ind = D.firmIndex[f];
      cell(tr, D.ind[ind] + (D.indName[ind] ? " " + D.indName[ind] : ""), "ind");
      cell(tr, pct(m.a[r]), "n");
      cell(tr, pct(m.t[r]), "n");
      cell(tr, pp(m.g[r]), "n");
      cell(tr, signed(m.z[r], 100, 2), "n");
      cell(tr, D.status[m.st[r]] || "", D.status[m.st[r]] || "");
      cell(tr, money(m.debt[r]), "n");
      cell(tr, m.yo[r] === null ? "" : String(m.yo[r]), "n");
      cell(tr, D.flags[m.fl[r]].split(";").join(", "), "flags");
      tr.addEventListener("click", toggle.bind(null, r));
      body.appendChild(tr);
      if (state.open[f]) { body.appendChild(detail(m, r)); }
    }
    var count = root.querySelector("#u-count");
    count.textContent = shown.length ? (L.showing + " " + (from + 1) + "–" + to + " " + L.of + " " +
      shown.length.toLocaleString("en") + " " + (shown.length === 1 ? L.firm : L.firms)) : L.none;
    root.querySelector("#u-page").textContent = (state.page + 1) + " / " + pages;
    root.querySelector("#u-prev").disabled = state.page === 0;
    root.querySelector("#u-next").disabled = state.page >= pages - 1;
    body.setAttribute("data-shown", String(to - from));
    root.setAttribute("data-matched", String(shown.length));
  }

  function toggle(r) {
    var f = D.m[state.measure].row[r];
    state.open[f] = !state.open[f];
    render();
  }

  function detail(m, r) {
    var f = m.row[r], k = D.drivers.length, flags = D.flags[m.fl[r]];
    var tr = el("tr", "detail"), td = el("td");
    tr.setAttribute("data-detail", D.ids[f]);
    td.colSpan = 10;
    var wrap = el("div", "firm-view");
    var left = el("div"), right = el("div");
    left.appendChild(el("h4", null, L.bridge));
    left.appendChild(bridge(m, r));
    var table = el("table", "drivers"), head = el("tr");
    [L.driver, L.firm_value, L.peer_value, L.contribution].forEach(function (h, i) {
      head.appendChild(el("th", i ? "n" : null, h));
    });
    table.appendChild(el("thead")).appendChild(head);
    var tb = el("tbody");
    for (var j = 0; j < k; j++) {
      var at = f * k + j, row = el("tr"), dec = D.dec[j], pv = m.pv[r * k + j];
      var fv = m.fvOver[at] !== undefined ? m.fvOver[at] : D.fvals[at];
      row.appendChild(el("td", null, D.drivers[j]));
      var own = fv === null ? "–" : fixed(fv / Math.pow(10, dec), dec);
      var raw = D.rawAt[f * k + j];
      var c = el("td", "n", own);
      if (raw !== undefined) {
        c.appendChild(el("span", "raw", " (" + L.winsorised + "; " + L.raw_value + " " + raw + ")"));
      }
      row.appendChild(c);
      row.appendChild(el("td", "n", pv === null ? "–" : fixed(pv / Math.pow(10, dec), dec)));
      row.appendChild(el("td", "n", pp(m.c[r * k + j])));
      tb.appendChild(row);
    }
    table.appendChild(tb);
    left.appendChild(table);
    right.appendChild(el("h4", null, L.history));
    right.appendChild(history(m, r));
    var notes = el("ul", "notes");
    var peers = m.pc[r];
    notes.appendChild(el("li", has(flags, "few_peers") ? "warn" : null,
      L.peer_median + " " + pct(m.pm[r]) + " (" + (peers || 0) + " " +
      (peers === 1 ? L.peer : L.peers) + ")" + (has(flags, "few_peers") ? ": " + L.few : "")));
    notes.appendChild(el("li", null, standing(m, r, flags)));
    flags.split(";").filter(Boolean).forEach(function (code) {
      var li = el("li");
      li.appendChild(el("code", null, code));
      li.appendChild(document.createTextNode(": " + (D.words[code] || code)));
      notes.appendChild(li);
    });
    right.appendChild(notes);
    wrap.appendChild(left);
    wrap.appendChild(right);
    td.appendChild(wrap);
    tr.appendChild(td);
    return tr;
  }

  function standing(m, r, flags) {
    var s = D.status[m.st[r]], n = m.yo[r];
    if (has(flags, "persistent")) {
      return L.persistent + ": " + s + " " + n + " " + L.years_in_row;
    }
    if (has(flags, "newly_outside")) {
      return L.newly + ": " + s + "; " + L.gap_prev + " " + pp(m.gp[r]) + " " + L.pp;
    }
    return L.gap_prev + " " + pp(m.gp[r]) + " " + L.pp;
  }

  function bridge(m, r) {
    var k = D.drivers.length, steps = [], level = m.pt[r];
    steps.push([L.peer_median, 0, m.pm[r], "level"]);
    steps.push([L.peers_offset, m.pm[r], m.pt[r], "change", m.po[r]]);
    for (var j = 0; j < k; j++) {
      var c = m.c[r * k + j] || 0;
      steps.push([D.drivers[j], level, level + c, "change", c]);
      level += c;
    }
    steps.push([L.target, 0, m.t[r], "level"]);
    steps.push([L.unexplained, m.t[r], m.a[r], "change", m.g[r]]);
    steps.push([L.actual, 0, m.a[r], "level"]);
    var lo = 0, hi = 1;
    steps.forEach(function (s) { lo = Math.min(lo, s[1], s[2]); hi = Math.max(hi, s[1], s[2]); });
    var W = 440, left = 150, right = 60, rowH = 18, H = steps.length * rowH + 8;
    var sc = (W - left - right) / (hi - lo || 1);
    var g = svg("svg", { viewBox: "0 0 " + W + " " + H, role: "img", "class": "bridge" });
    steps.forEach(function (s, i) {
      var y = 4 + i * rowH, x0 = left + (Math.min(s[1], s[2]) - lo) * sc;
      var w = Math.max(Math.abs(s[2] - s[1]) * sc, 1);
      var colour = s[3] === "level" ? "#3b4b66" : (s[2] > s[1] ? "#d95f02" : "#1b9e77");
      var t = svg("text", { x: left - 6, y: y + 12, "text-anchor": "end", "font-size": 11 });
      t.textContent = s[0];
      g.appendChild(t);
      g.appendChild(svg("rect", { x: x0, y: y + 2, width: w, height: rowH - 6, fill: colour }));
      var v = svg("text", { x: W - 4, y: y + 12, "text-anchor": "end", "font-size": 11 });
      v.textContent = s[3] === "level" ? pct(s[2]) : pp(s[4]);  // the step's own figure
      g.appendChild(v);
    });
    g.appendChild(svg("line", { x1: left + (0 - lo) * sc, x2: left + (0 - lo) * sc, y1: 2,
                                y2: H - 2, stroke: "#999", "stroke-width": 0.5 }));
    return g;
  }

  function history(m, r) {
    var start = m.hstart[r], n = m.hn[r], pts = [];
    for (var i = start; i < start + n; i++) {
      var t = m.hta[i];
      pts.push({ year: D.years[m.hya[i]], a: m.haa[i], t: t,
                 lo: m.hl[i] === null ? NaN : t + m.hl[i], hi: m.hh[i] === null ? NaN : t + m.hh[i],
                 s: D.status[m.hs[i]] });
    }
    var W = 440, H = 180, L0 = 40, R0 = 22, T0 = 24, B0 = 22;
    var y0 = pts[0].year, y1 = pts[pts.length - 1].year, top = 10;
    pts.forEach(function (p) { [p.a, p.t, p.hi].forEach(function (v) { if (!isNaN(v)) { top = Math.max(top, v); } }); });
    top = Math.ceil(top / 10) * 10;
    function X(year) { return L0 + (y1 === y0 ? (W - L0 - R0) / 2 : (year - y0) * (W - L0 - R0) / (y1 - y0)); }
    function Y(v) { return T0 + (1 - v / top) * (H - T0 - B0); }
    var g = svg("svg", { viewBox: "0 0 " + W + " " + H, role: "img", "class": "history" });
    [0, top / 2, top].forEach(function (v) {
      g.appendChild(svg("line", { x1: L0, x2: W - R0, y1: Y(v), y2: Y(v), stroke: "#e3e7ec" }));
      var t = svg("text", { x: L0 - 4, y: Y(v) + 4, "text-anchor": "end", "font-size": 10 });
      t.textContent = fixed(v, 0) + "%";
      g.appendChild(t);
    });
    var band = pts.filter(function (p) { return !isNaN(p.lo) && !isNaN(p.hi); });
    if (band.length) {
      var d = band.map(function (p) { return X(p.year) + "," + Y(p.hi); })
        .concat(band.slice().reverse().map(function (p) { return X(p.year) + "," + Y(p.lo); }));
      g.appendChild(svg("polygon", { points: d.join(" "), fill: "#9aa5b5", "fill-opacity": 0.3 }));
    }
    function line(key, attrs) {
      var d = pts.filter(function (p) { return !isNaN(p[key]); })
        .map(function (p) { return X(p.year) + "," + Y(p[key]); });
      attrs.points = d.join(" ");
      attrs.fill = "none";
      g.appendChild(svg("polyline", attrs));
    }
    line("t", { stroke: "#3b4b66", "stroke-dasharray": "4 3", "stroke-width": 1.5 });
    line("a", { stroke: "#1f2733", "stroke-width": 1.5 });
    pts.forEach(function (p) {
      if (isNaN(p.a)) { return; }
      var colour = p.s === "over" ? "#d95f02" : p.s === "under" ? "#1b9e77" : "#5b6675";
      g.appendChild(svg("circle", { cx: X(p.year), cy: Y(p.a), r: 3, fill: colour }));
    });
    [y0, y1].forEach(function (year) {
      var t = svg("text", { x: X(year), y: H - 8, "text-anchor": "middle", "font-size": 10 });
      t.textContent = String(year);
      g.appendChild(t);
    });
    var key = svg("text", { x: L0, y: 11, "font-size": 10 });
    key.textContent = L.legend;
    g.appendChild(key);
    return g;
  }

  function fromHash() {
    var h = location.hash.replace(/^#/, "");
    if (!h) { return; }
    h.split("&").forEach(function (part) {
      var kv = part.split("="), k = kv[0], v = decodeURIComponent(kv.slice(1).join("="));
      if (k === "q") { state.q = v; root.querySelector("#u-q").value = v; }
      if (k === "measure" && D.m[v]) { state.measure = v; root.querySelector("#u-measure").value = v; }
      if (k === "open") {
        var f = D.ids.indexOf(v);
        if (f >= 0) { state.open[f] = true; }
        if (!state.q) { state.q = v; root.querySelector("#u-q").value = v; }
      }
    });
    state.page = 0;
  }

  function controls() {
    var measure = root.querySelector("#u-measure"), ind = root.querySelector("#u-ind");
    Object.keys(D.m).forEach(function (name) {
      var o = el("option", null, name);
      o.value = name;
      measure.appendChild(o);
    });
    D.ind.map(function (c, i) { return [c, i]; }).forEach(function (p) {
      var o = el("option", null, p[0] + (D.indName[p[1]] ? " " + D.indName[p[1]] : ""));
      o.value = String(p[1]);
      ind.appendChild(o);
    });
    function on(id, ev, fn) { root.querySelector(id).addEventListener(ev, function (e) { fn(e.target); state.page = 0; update(); }); }
    on("#u-measure", "change", function (t) { state.measure = t.value; });
    on("#u-q", "input", function (t) { state.q = t.value; });
    on("#u-ind", "change", function (t) { state.ind = t.value; });
    on("#u-status", "change", function (t) { state.status = t.value; });
    on("#u-persistent", "change", function (t) { state.persistent = t.checked; });
    on("#u-new", "change", function (t) { state.fresh = t.checked; });
    root.querySelector("#u-prev").addEventListener("click", function () { state.page -= 1; render(); });
    root.querySelector("#u-next").addEventListener("click", function () { state.page += 1; render(); });
    Array.prototype.forEach.call(root.querySelectorAll("#u-table th[data-k]"), function (th) {
      th.addEventListener("click", function () {
        var k = th.getAttribute("data-k");
        state.dir = state.key === k ? -state.dir : (k === "firm" || k === "name" || k === "industry" ? 1 : -1);
        state.key = k;
        update();
      });
    });
    window.addEventListener("hashchange", function () { fromHash(); update(); });
  }

  function update() { filter(); render(); }

  if (!blob || typeof DecompressionStream === "undefined") {
    root.querySelector("#u-count").textContent = L.unsupported;
    return;
  }
  decode(blob.textContent).then(function (data) {
    D = prepare(data);
    state.measure = Object.keys(D.m)[0];
    controls();
    fromHash();
    update();
    document.documentElement.setAttribute("data-levgap-firms", String(D.ids.length));
  }).catch(function (e) {
    root.querySelector("#u-count").textContent = L.unsupported + " (" + e + ")";
    console.error(e);
  });
})();
