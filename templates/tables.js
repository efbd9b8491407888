/* hcpsite tables: sorting and a filter box for long tables, and cell wrapping hints.
   Plain JavaScript, no library, nothing loaded from elsewhere; every table reads as it is without it. */
(function () {
  "use strict";

  /** a table with at least this many body rows gets sorting and a filter box */
  var MIN_ROWS = 12;
  /** a cell text up to this long without spaces (a date, a code) is kept on one line */
  var SHORT = 16;
  /** a cell text at least this long gets room to wrap in lines rather than a word per line */
  var LONG = 40;

  var collator = new Intl.Collator(undefined, { numeric: true, sensitivity: "base" });
  /** a number as the site prints it: 1,234.5, -3, 12 %, −2.0 dB, 95.3 dB(A) */
  var NUMBER = /^([+\-\u2212]?(?:\d{1,3}(?:,\d{3})+|\d+)(?:\.\d+)?)\s*(?:%|dB(?:\([AC]\))?|h|x)?$/;
  var BLANK = /^(|\u2013|\u2014|-|n\/a|none|suppressed)$/i;

  function cellText(cell) {
    return (cell ? cell.textContent : "").replace(/\s+/g, " ").trim();
  }

  /** sort key of a cell: [rank, value]; numbers before text, blanks last */
  function sortKey(text) {
    if (BLANK.test(text)) { return [2, 0]; }
    var m = NUMBER.exec(text);
    if (m) { return [0, parseFloat(m[1].replace(/,/g, "").replace("\u2212", "-"))]; }
    return [1, text];
  }

  function compareKeys(a, b) {
    if (a[0] !== b[0]) { return a[0] - b[0]; }
    if (a[0] === 0) { return a[1] - b[1]; }
    if (a[0] === 1) { return collator.compare(a[1], b[1]); }
    return 0;
  }

  function bodyRows(table) {
    var body = table.tBodies[0];
    return body ? Array.prototype.slice.call(body.rows) : [];
  }

  function markCells(table) {
    bodyRows(table).forEach(function (row) {
      Array.prototype.forEach.call(row.cells, function (cell) {
        var text = cellText(cell);
        if (text.length <= SHORT && text.indexOf(" ") < 0) { cell.classList.add("nw"); }
        else if (text.length >= LONG) { cell.classList.add("long"); }
      });
    });
  }

  function sortBy(table, index, direction) {
    var body = table.tBodies[0];
    var rows = bodyRows(table);
    var keyed = rows.map(function (row) {
      var pos = Number(row.getAttribute("data-pos"));
      return { row: row, pos: pos, key: direction ? sortKey(cellText(row.cells[index])) : [0, pos] };
    });
    keyed.sort(function (a, b) {
      var c = compareKeys(a.key, b.key);
      if (direction === "descending" && a.key[0] === b.key[0]) { c = -c; }
      return c || a.pos - b.pos;
    });
    keyed.forEach(function (k) { body.appendChild(k.row); });
  }

  function makeSortable(table) {
    var head = table.tHead && table.tHead.rows[0];
    if (!head) { return; }
    bodyRows(table).forEach(function (row, i) { row.setAttribute("data-pos", String(i)); });
    Array.prototype.forEach.call(head.cells, function (th, index) {
      /* the header text stays plain text (it prints, and repeats on every printed sheet);
         a small button beside it sorts, and so does a click anywhere on the header cell */
      var button = document.createElement("button");
      button.type = "button";
      button.className = "sort";
      button.setAttribute("aria-label", "Sort by " + cellText(th));
      button.title = "Sort by this column (again: reverse, then the original order)";
      th.appendChild(document.createTextNode("\u00a0"));
      th.appendChild(button);
      th.classList.add("sort-head");
      th.addEventListener("click", function () {
        var now = th.getAttribute("aria-sort");
        var next = now === "ascending" ? "descending" : now === "descending" ? null : "ascending";
        Array.prototype.forEach.call(head.cells, function (other) { other.removeAttribute("aria-sort"); });
        if (next) { th.setAttribute("aria-sort", next); }
        sortBy(table, index, next);
      });
    });
  }

  function addFilter(table) {
    var rows = bodyRows(table);
    var tools = document.createElement("div");
    tools.className = "table-tools";
    var label = document.createElement("label");
    label.appendChild(document.createTextNode("Filter rows "));
    var input = document.createElement("input");
    input.type = "search";
    input.className = "table-filter";
    input.setAttribute("autocomplete", "off");
    label.appendChild(input);
    var count = document.createElement("span");
    count.className = "table-count";
    count.setAttribute("aria-live", "polite");
    count.textContent = rows.length.toLocaleString("en") + " rows";
    tools.appendChild(label);
    tools.appendChild(document.createTextNode(" "));
    tools.appendChild(count);
    var wrap = table.closest(".table-wrap") || table;
    wrap.parentNode.insertBefore(tools, wrap);
    var texts = rows.map(function (row) {
      return Array.prototype.map.call(row.cells, cellText).join(" \u0000 ").toLowerCase();
    });
    input.addEventListener("input", function () {
      var words = input.value.toLowerCase().split(/\s+/).filter(Boolean);
      var shown = 0;
      rows.forEach(function (row, i) {
        var hit = words.every(function (w) { return texts[i].indexOf(w) >= 0; });
        row.hidden = !hit;
        if (hit) { shown += 1; }
      });
      count.textContent = words.length
        ? shown.toLocaleString("en") + " of " + rows.length.toLocaleString("en") + " rows"
        : rows.length.toLocaleString("en") + " rows";
    });
  }

  function enhance(table) {
    markCells(table);
    var rows = bodyRows(table);
    if (rows.length < MIN_ROWS || table.querySelector("td.empty") || table.classList.contains("signoff")) { return; }
    table.classList.add("sortable");
    makeSortable(table);
    addFilter(table);
  }

  /** mark a sideways scroll box while it is scrolled, so the style sheet can edge the kept first column */
  function watchScroll(box) {
    box.addEventListener("scroll", function () {
      box.classList.toggle("is-scrolled", box.scrollLeft > 0);
    }, { passive: true });
  }

  function init() {
    Array.prototype.forEach.call(document.querySelectorAll("table.data"), enhance);
    Array.prototype.forEach.call(document.querySelectorAll(".table-wrap, main table:not(.data)"), watchScroll);
  }

  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", init);
  } else {
    init();
  }
}());
