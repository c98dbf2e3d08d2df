/* archive: tables that sort and filter, and a search that needs no worker (works on pages opened from disk).
   Plain JavaScript, no framework. Text from the archive is only ever set with textContent. */
(function () {
  "use strict";

  function root() {
    var base = typeof base_url === "string" ? base_url : ".";
    return base.replace(/\/$/, "") + "/";
  }

  function cellValue(row, index) {
    var cell = row.cells[index];
    return cell ? cell.textContent.trim() : "";
  }

  function sortKey(text) {
    if (/^\d{4}-\d{2}-\d{2}/.test(text)) return { kind: 1, value: text };
    var number = text.replace(/,/g, "").match(/^[+\u2212-]?\d+(\.\d+)?/);
    if (number) return { kind: 0, value: parseFloat(number[0].replace("\u2212", "-")) };
    return { kind: 2, value: text.toLowerCase() };
  }

  function compare(a, b) {
    if (a === "" || b === "") return a === b ? 0 : a === "" ? 1 : -1;  // empty cells last
    var x = sortKey(a), y = sortKey(b);
    if (x.kind !== y.kind) return x.kind - y.kind;
    if (x.value < y.value) return -1;
    return x.value > y.value ? 1 : 0;
  }

  function makeSortable(table) {
    var head = table.tHead;
    var body = table.tBodies[0];
    if (!head || !body || body.rows.length < 2) return;
    Array.prototype.forEach.call(head.rows[0].cells, function (th, index) {
      th.classList.add("sortable");
      th.tabIndex = 0;
      th.title = "Sort by this column";
      function sort() {
        var ascending = !th.classList.contains("sorted-asc");
        Array.prototype.forEach.call(head.rows[0].cells, function (other) {
          other.classList.remove("sorted-asc", "sorted-desc");
          other.removeAttribute("aria-sort");
        });
        th.classList.add(ascending ? "sorted-asc" : "sorted-desc");
        th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
        var rows = Array.prototype.slice.call(body.rows);
        rows.sort(function (r1, r2) {
          var order = compare(cellValue(r1, index), cellValue(r2, index));
          return ascending ? order : -order;
        });
        rows.forEach(function (row) { body.appendChild(row); });
      }
      th.addEventListener("click", sort);
      th.addEventListener("keydown", function (event) {
        if (event.key === "Enter" || event.key === " ") { event.preventDefault(); sort(); }
      });
    });
  }

  function addFilter(marker, table) {
    var body = table.tBodies[0];
    var head = table.tHead;
    if (!body || !head) return;
    var headers = Array.prototype.map.call(head.rows[0].cells, function (th) {
      return th.textContent.trim().toLowerCase();
    });
    var tools = document.createElement("div");
    tools.className = "table-tools";
    var box = document.createElement("input");
    box.type = "search";
    box.className = "form-control form-control-sm table-filter-text";
    box.placeholder = "Filter rows";
    box.setAttribute("aria-label", "Filter rows");
    tools.appendChild(box);
    var selects = [];
    (marker.getAttribute("data-columns") || "").split(",").forEach(function (name) {
      var index = headers.indexOf(name.trim());
      if (index < 0) return;
      var values = {};
      Array.prototype.forEach.call(body.rows, function (row) {
        cellValue(row, index).split(/,\s*/).forEach(function (v) { if (v) values[v] = true; });
      });
      var select = document.createElement("select");
      select.className = "form-select form-select-sm";
      select.setAttribute("aria-label", "Only rows with this " + name.trim());
      select.dataset.column = String(index);
      var all = document.createElement("option");
      all.value = "";
      all.textContent = "any " + name.trim();
      select.appendChild(all);
      Object.keys(values).sort().forEach(function (v) {
        var option = document.createElement("option");
        option.value = v;
        option.textContent = v;
        select.appendChild(option);
      });
      tools.appendChild(select);
      selects.push(select);
    });
    var count = document.createElement("span");
    count.className = "count";
    tools.appendChild(count);
    marker.appendChild(tools);

    function apply() {
      var words = box.value.toLowerCase().split(/\s+/).filter(Boolean);
      var shown = 0;
      Array.prototype.forEach.call(body.rows, function (row) {
        var text = row.textContent.toLowerCase();
        var keep = words.every(function (w) { return text.indexOf(w) >= 0; });
        selects.forEach(function (select) {
          if (keep && select.value) {
            keep = cellValue(row, Number(select.dataset.column)).split(/,\s*/).indexOf(select.value) >= 0;
          }
        });
        row.hidden = !keep;
        if (keep) shown += 1;
      });
      count.textContent = shown + " of " + body.rows.length + " shown";
    }
    box.addEventListener("input", apply);
    selects.forEach(function (select) { select.addEventListener("change", apply); });
    apply();
  }

  function setUpTables() {
    var main = document.querySelector('[role="main"]');
    if (!main) return;
    Array.prototype.forEach.call(main.querySelectorAll("table"), function (table) {
      table.classList.add("table", "table-striped", "table-hover");
      Array.prototype.forEach.call(table.querySelectorAll("td"), function (cell) {
        if (cell.textContent.trim().length <= 40) cell.classList.add("short");
      });
      if (!table.parentElement.classList.contains("table-scroll")) {
        var wrap = document.createElement("div");
        wrap.className = "table-scroll";
        table.parentNode.insertBefore(wrap, table);
        wrap.appendChild(table);
      }
      makeSortable(table);
    });
    Array.prototype.forEach.call(main.querySelectorAll(".table-filter"), function (marker) {
      var next = marker.nextElementSibling;
      while (next && !next.querySelector("table") && next.tagName !== "TABLE") next = next.nextElementSibling;
      if (next) addFilter(marker, next.tagName === "TABLE" ? next : next.querySelector("table"));
    });
  }

  /* --- search ----------------------------------------------------------------------------------------- */

  function stem(word) {
    var endings = ["ies", "ing", "es", "ed", "s"];
    for (var i = 0; i < endings.length; i++) {
      var e = endings[i];
      if (word.length > e.length + 3 && word.slice(-e.length) === e) return word.slice(0, -e.length);
    }
    return word;
  }

  function words(text) {
    return text.toLowerCase().match(/[\p{L}\p{N}]+/gu) || [];
  }

  function prepared(index) {
    if (!index.prepared) {
      index.docs.forEach(function (doc) {
        doc.titleWords = words(doc.t);
        doc.allWords = doc.titleWords.concat(words(doc.x));
      });
      index.prepared = true;
    }
    return index;
  }

  function hits(list, options) {
    var n = 0;
    list.forEach(function (w) {
      if (options.some(function (o) { return w.indexOf(o) === 0; })) n += 1;
    });
    return n;
  }

  function search(index, query) {
    var terms = words(query);
    if (!terms.length) return [];
    var alternatives = terms.map(function (t) {
      var group = index.synonyms[t] || index.synonyms[t.replace(/s$/, "")] || [];
      return [t].concat(group).map(stem);
    });
    var found = [];
    prepared(index).docs.forEach(function (doc) {
      var score = 0;
      for (var i = 0; i < alternatives.length; i++) {
        var inAll = hits(doc.allWords, alternatives[i]);
        if (!inAll) return;
        score += inAll + 3 * hits(doc.titleWords, alternatives[i]);
      }
      found.push({ doc: doc, score: score });
    });
    found.sort(function (a, b) { return b.score - a.score || (a.doc.t < b.doc.t ? -1 : 1); });
    return found.slice(0, 20).map(function (f) { return f.doc; });
  }

  function setUpSearch() {
    var box = document.getElementById("archive-search");
    var panel = document.getElementById("archive-search-results");
    if (!box || !panel) return;
    var loading = false;
    var waiting = [];

    function withIndex(callback) {
      if (window.ARCHIVE_SEARCH) { callback(window.ARCHIVE_SEARCH); return; }
      waiting.push(callback);
      if (loading) return;
      loading = true;
      var script = document.createElement("script");
      script.src = root() + "assets/search-index.js";
      script.onload = function () { waiting.splice(0).forEach(function (cb) { cb(window.ARCHIVE_SEARCH); }); };
      script.onerror = function () { loading = false; show(null); };
      document.head.appendChild(script);
    }

    function show(results) {
      panel.textContent = "";
      if (results === null) {
        var failed = document.createElement("div");
        failed.className = "empty";
        failed.textContent = "The search index could not be loaded.";
        panel.appendChild(failed);
      } else if (!results.length) {
        var empty = document.createElement("div");
        empty.className = "empty";
        empty.textContent = "Nothing found for \u201c" + box.value.trim() + "\u201d.";
        panel.appendChild(empty);
      }
      (results || []).forEach(function (doc) {
        var a = document.createElement("a");
        a.href = root() + doc.u;
        a.textContent = doc.t;
        var kind = document.createElement("span");
        kind.className = "kind";
        kind.textContent = doc.k;
        a.appendChild(kind);
        panel.appendChild(a);
      });
      panel.hidden = false;
    }

    function run() {
      var query = box.value;
      if (!query.trim()) { panel.hidden = true; return; }
      withIndex(function (index) { if (box.value === query) show(search(index, query)); });
    }

    box.addEventListener("focus", function () { withIndex(function () {}); });
    box.addEventListener("input", run);
    box.addEventListener("keydown", function (event) {
      if (event.key === "Escape") { panel.hidden = true; box.blur(); }
      if (event.key === "Enter") {
        var first = panel.querySelector("a");
        if (first) window.location.href = first.href;
      }
      if (event.key === "ArrowDown") {
        var link = panel.querySelector("a");
        if (link) { event.preventDefault(); link.focus(); }
      }
    });
    document.addEventListener("click", function (event) {
      if (!panel.contains(event.target) && event.target !== box) panel.hidden = true;
    });
    document.addEventListener("keydown", function (event) {
      var tag = event.target.tagName;
      if (event.key === "/" && tag !== "INPUT" && tag !== "TEXTAREA" && tag !== "SELECT") {
        event.preventDefault();
        box.focus();
      }
    });
  }

  document.addEventListener("DOMContentLoaded", function () {
    setUpTables();
    setUpSearch();
  });
})();
