// The live half of a record's page (a plan or a sizing) while it is queued or solving.
//
// It follows the record's Server-Sent Events (GET /v1/plans/{id}/events or
// /v1/sizings/{id}/events, named by the script tag's data-events): each "progress"
// event rewrites the status and the sentence saying where the search stands, in the
// words the server writes them; the "end" event loads the finished page. The parts the
// server draws (a plan's progress chart, marked data-live-swap) are fetched again at
// most every data-refresh seconds while events arrive. Without JavaScript the page refreshes itself instead
// (a <meta> refresh inside <noscript>); when the stream cannot be had (no EventSource,
// a refusal such as 429) this script falls back to the same refresh.
//
// The stream is same-origin and asked for like the page itself, so it carries whatever
// credentials the page was fetched with; nothing secret is in the page or the URL.
// Text goes in through textContent only.
(function () {
  "use strict";
  var me = document.currentScript;
  if (!me) return;
  var url = me.getAttribute("data-events");
  var kind = me.getAttribute("data-kind");
  var every = 1000 * (Number(me.getAttribute("data-refresh")) || 2);
  var note = document.querySelector("p.status .refresh-note");

  function say(text) {
    if (note) note.textContent = text;
  }

  function refreshLater() {
    say(" · this page refreshes itself every " + every / 1000 + " s");
    window.setTimeout(function () { window.location.reload(); }, every);
  }

  if (!url || !window.EventSource) {
    refreshLater();
    return;
  }

  // -- the server's number formats (service/web/svg.py, pages.py) ---------------------
  function g(x, digits) {  // Python's format(x, ".{digits}g") for the values shown here
    return String(Number(Number(x).toPrecision(digits)));
  }
  function two(n) {
    return (n < 10 ? "0" : "") + n;
  }
  function duration(s) {
    if (!isFinite(s)) return "-";
    if (s < 60) return g(s, 3) + "s";
    var t = Math.round(s), h = Math.floor(t / 3600), m = Math.floor((t % 3600) / 60);
    var sec = two(t % 60) + "s";
    return h ? h + "h " + two(m) + "m " + sec : m + "m " + sec;
  }
  function difference(s) {
    return s > 0 && s < 0.01 ? g(1000 * s, 2) + " ms" : duration(s);
  }
  function percent(fraction) {
    var pct = 100 * fraction;
    if (!(pct > 0) || pct >= 0.01) return pct.toFixed(2) + "%";
    return pct.toFixed(Math.min(1 - Math.floor(Math.log10(pct)), 12)) + "%";
  }
  function count(n, noun) {
    return n + " " + noun + (n === 1 ? "" : "s");
  }

  // -- where the search stands, in the page's words -----------------------------------
  function planSentence(doc) {
    var p = doc.progress || {};
    if (p.best_makespan == null && doc.status !== "solving") return null;
    var text = "After " + Number(p.elapsed || 0).toFixed(1) + " s";
    text += p.time_budget ? " of a " + String(Number(p.time_budget)) + " s budget" : " of search";
    if (p.best_makespan == null) return text + ", no plan has been found yet.";
    var ms = Number(p.best_makespan);
    text += ", the best plan found finishes in " + duration(ms);
    if (p.best_lower_bound == null) return text + ".";
    var lb = Number(p.best_lower_bound);
    text += "; no plan can finish before " + duration(lb) + ", so it is at most ";
    text += difference(ms - lb);
    if (lb > 0) text += " (" + percent((ms - lb) / lb) + ")";
    return text + " longer than the best possible.";
  }
  function sizingSentence(doc) {
    var p = doc.progress || {};
    if (p.nodes_needed == null) return null;
    var n = Number(p.nodes_needed);
    var text = "After " + Number(p.elapsed || 0).toFixed(1) + " s, " + count(n, "node");
    text += (n === 1 ? " meets" : " meet") + " the deadline so far";
    if (p.nodes_lower_bound != null) {
      text += ", and no plan with fewer than " + count(Number(p.nodes_lower_bound), "node");
      text += " can";
    }
    return text + ".";
  }
  var sentenceOf = kind === "sizing" ? sizingSentence : planSentence;

  function show(doc) {
    var status = document.querySelector("p.status");
    var word = document.querySelector("p.status .status-word");
    if (status && word && doc.status) {
      word.textContent = doc.status;
      status.className = "status status-" + doc.status;
    }
    var text = sentenceOf(doc);
    if (text === null) return;
    var el = document.querySelector(".progress-sentence");
    if (!el && status) {  // none yet (the page was drawn while queued): one under the status
      el = document.createElement("p");
      el.className = "card progress-sentence";
      status.insertAdjacentElement("afterend", el);
    }
    if (el) {
      el.textContent = text;
      el.classList.remove("muted");
    }
  }

  // -- the server-drawn parts marked data-live-swap, fetched again now and then -------
  var fetchedAt = Date.now(), fetching = false;
  function swapDrawn() {
    var parts = document.querySelectorAll("[data-live-swap]");
    if (!parts.length || fetching || Date.now() - fetchedAt < every || !window.fetch) return;
    fetching = true;
    fetchedAt = Date.now();
    window.fetch(window.location.href, { cache: "no-store", credentials: "same-origin" })
      .then(function (resp) { return resp.ok ? resp.text() : null; })
      .then(function (html) {
        if (html === null) return;
        var fresh = new DOMParser().parseFromString(html, "text/html");
        parts.forEach(function (old) {  // the names are the templates' own words
          var name = old.getAttribute("data-live-swap");
          var found = fresh.querySelector('[data-live-swap="' + name + '"]');
          if (found) old.replaceWith(document.importNode(found, true));
        });
      })
      .catch(function () {})
      .then(function () { fetching = false; });
  }

  var source = new EventSource(url);
  source.addEventListener("open", function () { say(" · following the search live"); });
  source.addEventListener("progress", function (ev) {
    show(JSON.parse(ev.data));
    swapDrawn();
  });
  source.addEventListener("end", function () {
    source.close();
    window.location.reload();
  });
  source.addEventListener("error", function () {
    // CONNECTING: the browser tries again by itself (after a "timeout" event, say);
    // CLOSED: refused for good (not found, too many streams), so refresh as without it
    if (source.readyState === EventSource.CLOSED) refreshLater();
  });
})();
