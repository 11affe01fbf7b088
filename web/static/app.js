// residua watch page: follows /api/events (Server-Sent Events) and keeps one
// card per job; each card's chart is the server's SVG, fetched again when
// the job's history version changes.
"use strict";

const list = document.getElementById("jobs");
const empty = document.getElementById("empty");
const more = document.getElementById("more");
const link = document.getElementById("link");
const template = document.getElementById("job-template");
const cards = new Map();

const fmtInt = new Intl.NumberFormat("en");

function duration(s) {
  if (s == null || !isFinite(s)) return "—";
  if (s < 1) return Math.round(s * 1000) + " ms";
  if (s < 10) return s.toFixed(1) + " s";
  if (s < 60) return Math.round(s) + " s";
  if (s < 3600) return Math.floor(s / 60) + " min " + String(Math.round(s % 60)).padStart(2, "0") + " s";
  return Math.floor(s / 3600) + " h " + String(Math.round((s % 3600) / 60)).padStart(2, "0") + " min";
}

// num reads a number of the JSON, where NaN and infinities are the strings
// "NaN", "+Inf" and "-Inf" and a missing value is null.
function num(v) {
  if (v == null) return null;
  if (typeof v === "string") return v === "NaN" ? NaN : v === "+Inf" ? Infinity : -Infinity;
  return v;
}

function sci(v) {
  v = num(v);
  if (v == null) return "—";
  if (!isFinite(v)) return String(v);
  return v.toExponential(2);
}

// stateClass maps a job's state and outcome to the colour the card carries.
function stateClass(job) {
  if (job.state !== "done") return job.state;
  switch (job.outcome) {
    case "converged":
    case "cancelled":
      return job.outcome;
    case "breakdown":
    case "setup-failed":
    case "refused":
    case "failed":
      return "failed";
  }
  return "stopped";
}

function card(job) {
  let li = cards.get(job.id);
  if (!li) {
    li = template.content.firstElementChild.cloneNode(true);
    li.id = "job-" + job.id;
    li.dataset.updates = "0";
    li.dataset.version = "";
    li.querySelector(".id").textContent = job.id;
    li.querySelector(".csv").href = "/api/jobs/" + job.id + "/history?format=csv";
    li.querySelector(".json").href = "/api/jobs/" + job.id + "/history";
    cards.set(job.id, li);
  }
  return li;
}

function fill(li, job) {
  const q = (sel) => li.querySelector(sel);
  li.dataset.state = stateClass(job);
  q(".state").textContent = job.state_text;
  q(".matrix").textContent = job.label && job.label !== job.matrix ? job.label + " · " + job.matrix : job.matrix;
  let size = "";
  if (job.rows) {
    size = job.rows === job.cols ? "n = " + fmtInt.format(job.rows) : fmtInt.format(job.rows) + " × " + fmtInt.format(job.cols);
    size += " · " + fmtInt.format(job.nonzeros) + " nonzeros";
  }
  q(".size").textContent = size;
  q(".precond").textContent = job.preconditioner || "—";
  let it = fmtInt.format(job.iteration);
  if (job.rhs_count > 1) it += " (right-hand side " + (job.rhs + 1) + " of " + job.rhs_count + ")";
  q(".iteration").textContent = job.state === "queued" ? "—" : it;
  let res = sci(job.relative_residual);
  if (job.normal_residual_norm != null) res += " · ‖Aᵀr‖ " + sci(job.normal_residual_norm);
  if (job.tolerance) res += " (tolerance " + job.tolerance.toExponential(0) + ")";
  q(".residual").textContent = res;
  const red = num(job.reduction_per_iteration);
  q(".reduction").textContent = red == null ? "—" : red.toFixed(4);
  let left = "—";
  if (job.state === "running") {
    if (job.iterations_left != null) {
      left = "≈ " + fmtInt.format(job.iterations_left) + " it · " + duration(job.seconds_left);
    } else if (red != null && red >= 1) {
      left = "no estimate: not decreasing lately";
    } else {
      left = "no estimate yet";
    }
  } else if (job.state === "done") {
    left = "done";
  }
  q(".left").textContent = left;
  q(".elapsed").textContent = job.state === "queued" ? "waiting" : duration(job.elapsed_seconds);
  // A finished job says how it ended in a sentence (the summary's
  // headline); a failed one what went wrong.
  const err = q(".error");
  const note = job.state === "done" ? (job.headline || job.error) : job.error;
  err.hidden = !note;
  err.textContent = note || "";
  if (job.history_rows > 0 && String(job.version) !== li.dataset.version && !li.dataset.loading) {
    loadChart(li, job);
  }
}

async function loadChart(li, job) {
  li.dataset.loading = "1";
  try {
    const res = await fetch("/api/jobs/" + job.id + "/chart.svg?v=" + job.version, { cache: "no-store" });
    if (res.ok) {
      const svg = await res.text();
      li.querySelector(".chart").innerHTML = svg;
      li.dataset.version = String(job.version);
      li.dataset.updates = String(Number(li.dataset.updates) + 1);
    }
  } catch (e) {
    // The next event tries again.
  } finally {
    delete li.dataset.loading;
  }
}

function render(data) {
  const seen = new Set();
  let prev = null;
  for (const job of data.jobs) {
    seen.add(job.id);
    const li = card(job);
    fill(li, job);
    // Newest first, as the server lists them.
    const want = prev ? prev.nextSibling : list.firstChild;
    if (li !== want) list.insertBefore(li, want);
    prev = li;
  }
  for (const [id, li] of cards) {
    if (!seen.has(id)) {
      li.remove();
      cards.delete(id);
    }
  }
  empty.hidden = data.jobs.length > 0;
  more.hidden = data.total <= data.jobs.length;
  more.textContent = "Showing the " + data.jobs.length + " newest of " + fmtInt.format(data.total) + " jobs; all are listed at /api/jobs.";
}

function connect() {
  const es = new EventSource("/api/events");
  es.addEventListener("jobs", (ev) => {
    link.dataset.state = "live";
    link.textContent = "live";
    render(JSON.parse(ev.data));
  });
  es.onerror = async () => {
    link.dataset.state = "lost";
    link.textContent = "connection lost, retrying…";
    // A server that now asks for its token (restarted with one, or with
    // another) will not let the stream back in: ask for it.
    try {
      const res = await fetch("/api/jobs", { cache: "no-store" });
      if (res.status === 401) {
        es.close();
        askToken();
      }
    } catch (e) {
      // The server is away; the stream retries by itself.
    }
  };
}

// Sign-in, for a server started with --token-file: the token typed in is
// sent once to POST /api/session, which answers with an HttpOnly,
// SameSite=Strict session cookie holding a digest of the token; the page
// keeps no copy of the token (the input is cleared before the request),
// and the browser sends the cookie with every later request, the event
// stream and the charts included, until it closes.
const signin = document.getElementById("signin");
const tokenInput = document.getElementById("token");
const signinError = document.getElementById("signin-error");

function askToken() {
  link.dataset.state = "lost";
  link.textContent = "token needed";
  signin.hidden = false;
  tokenInput.focus();
}

signin.addEventListener("submit", async (ev) => {
  ev.preventDefault();
  const token = tokenInput.value.trim();
  tokenInput.value = "";
  signinError.hidden = true;
  try {
    const res = await fetch("/api/session", { method: "POST", headers: { Authorization: "Bearer " + token } });
    if (res.ok) {
      signin.hidden = true;
      connect();
      return;
    }
    signinError.textContent = "that is not this server's token";
  } catch (e) {
    signinError.textContent = "the server did not answer";
  }
  signinError.hidden = false;
});

async function start() {
  try {
    const res = await fetch("/api/jobs", { cache: "no-store" });
    if (res.status === 401) {
      askToken();
      return;
    }
  } catch (e) {
    // Not reachable now: the event stream retries by itself.
  }
  connect();
}

start();
