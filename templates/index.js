// index.html's script (inlined by screening/webpage.py): the table of every building, sorted and
// filtered in the browser. State lives in the URL hash: #sort=<column>-<asc|desc>&tier=…&use=…
// &station=…&kind=…&min=…&q=…  Data are rendered with textContent and setAttribute only, never as markup.
(function () {
  "use strict";
  var errorBox = document.getElementById("page-errors");
  function showError(text) {
    errorBox.hidden = false;
    var p = document.createElement("p");
    p.textContent = "Page error: " + text;
    errorBox.appendChild(p);
  }
  window.addEventListener("error", function (e) { showError(e.message || String(e)); });

  var data = JSON.parse(document.getElementById("page-data").textContent);
  var rows = data.rows;
  // key, title, numeric, value for sorting
  var COLUMNS = [
    {key: "rank", title: "rank", num: true, val: function (r) { return r.rank; }},
    {key: "building", title: "building", val: function (r) { return r.id; }},
    {key: "name", title: "name", val: function (r) { return r.name; }},
    {key: "tier", title: "tier", val: function (r) { return r.tier_order; }, num: true, left: true},
    {key: "use", title: "use", val: function (r) { return r.use; }},
    {key: "station", title: "station", val: function (r) { return r.station; }},
    {key: "ratio", first: "desc", title: "ratio", num: true, val: function (r) { return r.ratio; }},
    {key: "cost", first: "desc", title: "expected savings / yr", num: true, val: function (r) { return r.cost; }},
    {key: "excess", first: "desc", title: "excess cost / yr", num: true, val: function (r) { return r.excess; }},
    {key: "kind", title: "look for", val: function (r) { return r.kind_text; }},
    {key: "review", first: "desc", title: "strong evidence", val: function (r) { return r.review ? 1 : 0; }, num: true,
     left: true},
    {key: "flags", title: "flags and data issues", val: function (r) { return r.flags + " " + r.issues; }}
  ];
  var FILTERS = ["tier", "use", "station", "kind", "min", "q"];
  var NONE_KIND = "(none named)";

  function readHash() {
    var state = {sort: "rank-asc"};
    var h = window.location.hash.replace(/^#/, "");
    h.split("&").forEach(function (part) {
      if (!part) { return; }
      var i = part.indexOf("=");
      var k = i < 0 ? part : part.slice(0, i);
      var v = i < 0 ? "" : part.slice(i + 1);
      try { v = decodeURIComponent(v.replace(/\+/g, " ")); } catch (err) { return; }
      state[k] = v;
    });
    return state;
  }
  // the new state goes into the hash; the table follows (directly, or through hashchange)
  function writeHash(state) {
    var parts = [];
    ["sort"].concat(FILTERS).forEach(function (k) {
      if (state[k] && !(k === "sort" && state[k] === "rank-asc")) {
        parts.push(k + "=" + encodeURIComponent(state[k]));
      }
    });
    var h = parts.join("&");
    try {
      history.replaceState(null, "", "#" + h);
      render();
    } catch (err) {                                   // some browsers refuse it on file: pages
      if (window.location.hash.replace(/^#/, "") === h) { render(); } else { window.location.hash = h; }
    }
  }

  function distinct(get) {
    var seen = {};
    rows.forEach(function (r) { [].concat(get(r)).forEach(function (v) { seen[v] = true; }); });
    return Object.keys(seen).sort();
  }
  function fillSelect(id, values) {
    var sel = document.getElementById(id);
    values.forEach(function (v) {
      var o = document.createElement("option");
      o.value = v;
      o.textContent = v;
      sel.appendChild(o);
    });
  }
  fillSelect("f-tier", data.tiers);
  fillSelect("f-use", distinct(function (r) { return r.use; }));
  fillSelect("f-station", distinct(function (r) { return r.station; }));
  fillSelect("f-kind", distinct(function (r) { return r.kinds.length ? r.kinds : [NONE_KIND]; }));

  var head = document.getElementById("building-head");
  COLUMNS.forEach(function (c) {
    var th = document.createElement("th");
    var b = document.createElement("button");
    b.type = "button";
    b.className = "sort";
    b.setAttribute("data-sort", c.key);
    b.textContent = c.title;
    b.addEventListener("click", function () {
      var s = readHash();
      var cur = (s.sort || "rank-asc").split("-");
      var dir = cur[0] === c.key ? (cur[1] === "asc" ? "desc" : "asc") : (c.first || "asc");
      s.sort = c.key + "-" + dir;
      writeHash(s);
    });
    th.appendChild(b);
    if (c.num && !c.left) { th.className = "num"; }
    head.appendChild(th);
  });

  function matches(r, s) {
    if (s.tier && r.tier !== s.tier) { return false; }
    if (s.use && r.use !== s.use) { return false; }
    if (s.station && r.station !== s.station) { return false; }
    if (s.kind && (s.kind === NONE_KIND ? r.kinds.length > 0 : r.kinds.indexOf(s.kind) < 0)) { return false; }
    if (s.min) {                                       // expected savings per year of at least this much
      var m = parseFloat(s.min);
      if (isFinite(m) && !(r.cost !== null && r.cost >= m)) { return false; }
    }
    if (s.q) {
      var q = s.q.toLowerCase();
      var hay = [r.id, r.name, r.use, r.station, r.tier, r.kind_text, r.flags, r.issues].join(" ").toLowerCase();
      if (hay.indexOf(q) < 0) { return false; }
    }
    return true;
  }
  function compare(col, dir) {
    var sign = dir === "desc" ? -1 : 1;
    return function (a, b) {
      var x = col.val(a), y = col.val(b);
      var xn = x === null || x === undefined || x === "", yn = y === null || y === undefined || y === "";
      if (xn !== yn) { return xn ? 1 : -1; }         // missing values last, either way
      if (!xn && x !== y) {
        if (col.num) { return sign * (x - y); }
        return sign * (String(x) < String(y) ? -1 : 1);
      }
      return a.rank - b.rank;                          // ties in the audit order
    };
  }
  function cell(tr, text, cls) {
    var td = document.createElement("td");
    td.textContent = text;
    if (cls) { td.className = cls; }
    tr.appendChild(td);
    return td;
  }

  function render() {
    var s = readHash();
    FILTERS.forEach(function (k) {
      var el = document.getElementById("f-" + k);
      el.value = s[k] || "";
      if (el.value !== (s[k] || "")) { el.value = ""; }
    });
    var sp = (s.sort || "rank-asc").split("-");
    var col = COLUMNS.filter(function (c) { return c.key === sp[0]; })[0] || COLUMNS[0];
    var dir = sp[1] === "desc" ? "desc" : "asc";
    var shown = rows.filter(function (r) { return matches(r, s); }).sort(compare(col, dir));
    var body = document.getElementById("building-rows");
    while (body.firstChild) { body.removeChild(body.firstChild); }
    shown.forEach(function (r) {
      var tr = document.createElement("tr");
      tr.setAttribute("data-id", r.id);
      cell(tr, String(r.rank), "num");
      var idCell = cell(tr, "", "mono");
      if (r.sheet) {
        var a = document.createElement("a");
        a.setAttribute("href", r.sheet);
        a.textContent = r.id;
        idCell.appendChild(a);
      } else {
        idCell.textContent = r.id;
      }
      cell(tr, r.name, "name");
      cell(tr, r.tier, "tier nowrap");
      cell(tr, r.use);
      cell(tr, r.station);
      cell(tr, r.ratio_text, "num");
      cell(tr, r.cost_text, "num cost");
      cell(tr, r.excess_text, "num");
      cell(tr, r.kind_text).setAttribute("title", r.why);
      cell(tr, r.review ? "yes" : "");
      cell(tr, [r.flags, r.issues].filter(function (x) { return x; }).join(" · "), "flags");
      body.appendChild(tr);
    });
    head.querySelectorAll("button.sort").forEach(function (b) {
      var on = b.getAttribute("data-sort") === col.key;
      b.setAttribute("aria-sort", on ? (dir === "asc" ? "ascending" : "descending") : "none");
      b.parentNode.setAttribute("aria-sort", on ? (dir === "asc" ? "ascending" : "descending") : "none");
    });
    document.getElementById("shown-count").textContent =
      shown.length + " of " + rows.length + " buildings shown, sorted by " + col.title +
      (dir === "asc" ? " (ascending)." : " (descending).");
  }

  FILTERS.forEach(function (k) {
    var el = document.getElementById("f-" + k);
    el.addEventListener(k === "q" ? "input" : "change", function () {
      var s = readHash();
      s[k] = el.value;
      writeHash(s);
    });
  });
  document.getElementById("f-clear").addEventListener("click", function () {
    writeHash({});
  });
  window.addEventListener("hashchange", render);
  render();
})();
