// The explorer page: the inputs become the JSON routes' bodies; figures and charts come back from them.
"use strict";

const FAMILIES = JSON.parse(document.getElementById("families").textContent);
const DEFAULTS = {uniform: {low: 40, high: 100}, lognormal: {median: 60, sigma: 0.3}, normal: {mean: 60, sd: 10},
                  gamma: {shape: 9, scale: 7}, exponential: {mean: 20}};
const CHARTS = ["top-values", "revenue-by-reserve", "bid-strategy", "revenue-by-bidders"];
const $ = (id) => document.getElementById(id);
let lastFit = null, pending = 0, shownUrls = [];

function number(id) {
  const raw = $(id).value.trim();
  return raw === "" ? null : Number(raw);
}

function rules() {
  return [...document.querySelectorAll("input[name=rule]:checked")].map((b) => b.value);
}

function direction() { return $("direction").value; }

function modelKey() { return direction() === "forward" ? "bidder_values" : "bidder_costs"; }

function ownKey() { return direction() === "forward" ? "seller_value" : "buyer_value"; }

function model() {
  const pasted = $("model-json").value.trim();
  if (pasted) return JSON.parse(pasted);
  const out = {family: $("family").value};
  for (const input of $("params").querySelectorAll("input")) {
    if (input.value.trim() !== "") out[input.name] = Number(input.value);
  }
  return out;
}

function showParams() {
  const family = $("family").value, box = $("params");
  box.replaceChildren();
  for (const name of FAMILIES[family]) {
    const id = "param-" + name, label = document.createElement("label"), input = document.createElement("input");
    label.htmlFor = id;
    label.textContent = name;
    Object.assign(input, {id, name, type: "number", step: "any", inputMode: "decimal"});
    const preset = (DEFAULTS[family] || {})[name];
    if (preset !== undefined) input.value = preset;
    box.append(label, input);
  }
}

function headers(extra) {
  const key = $("api-key").value.trim(), out = Object.assign({}, extra);
  if (key) out.Authorization = "Bearer " + key;
  return out;
}

async function post(path, body, accept) {
  const resp = await fetch(path, {method: "POST", body: JSON.stringify(body),
    headers: headers({"Content-Type": "application/json", Accept: accept || "application/json"})});
  if (!resp.ok) {
    let detail = resp.status + " " + resp.statusText;
    try {
      const problem = await resp.json();
      detail = (problem.errors || []).map((e) => e.field + ": " + e.message).join("; ") || problem.detail || detail;
    } catch (e) { /* an image or empty body: the status says it */ }
    throw new Error(detail);
  }
  return accept && accept.startsWith("image/") ? resp.blob() : resp.json();
}

function baseBody() {
  const body = {[modelKey()]: model(), bidders: number("bidders")};
  const reserve = number("reserve"), own = number("own");
  if (reserve !== null) body.reserve = reserve;
  if (own !== null) body[ownKey()] = own;
  return body;
}

function fmt(x) {
  if (x === null || x === undefined) return "–";
  const digits = Math.abs(x) >= 1000 ? 0 : Math.abs(x) >= 10 ? 2 : 4;
  return x.toLocaleString("en-US", {maximumFractionDigits: digits, minimumFractionDigits: 0});
}

function row(label, value, id) {
  const tr = document.createElement("tr"), th = document.createElement("th"), td = document.createElement("td");
  th.scope = "row";
  th.textContent = label;
  td.textContent = fmt(value);
  td.id = id;
  td.dataset.value = value === null || value === undefined ? "" : String(value);
  tr.append(th, td);
  return tr;
}

async function update() {
  const ticket = ++pending, status = $("status");
  status.textContent = "Computing…";
  let body;
  try {
    body = baseBody();
  } catch (e) {
    status.textContent = "The pasted model is not valid JSON: " + e.message;
    return;
  }
  const forward = direction() === "forward", money = forward ? "revenue" : "payment";
  const chosen = rules();
  try {
    const topBody = {[modelKey()]: body[modelKey()], bidders: body.bidders};
    const [top, revenue, reserve] = await Promise.all([
      post("/v1/top-values", topBody),
      post("/v1/revenue", Object.assign({}, body, {rules: chosen})),
      forward || body.buyer_value !== undefined
        ? post("/v1/reserve-price", Object.fromEntries(Object.entries(body).filter(([k]) => k !== "reserve")))
        : Promise.resolve(null),
    ]);
    if (ticket !== pending) return;
    const rows = [];
    const names = forward ? ["Expected highest value", "Expected second-highest value"]
                          : ["Expected lowest cost", "Expected second-lowest cost"];
    top.results.slice(0, 2).forEach((r, i) => rows.push(row(names[i], r.mean, "fig-rank" + r.rank)));
    for (const r of revenue.results) {
      const label = r.rule.replace("_", " ");
      rows.push(row(`Expected ${money}, ${label}`, r["expected_" + money], `fig-${money}-${r.rule}`));
      rows.push(row(`Spread (sd) of the ${money}, ${label}`, r[money + "_sd"], `fig-sd-${r.rule}`));
    }
    if (reserve) rows.push(row(forward ? "Optimal reserve" : "Optimal maximum price", reserve.optimal_reserve, "fig-optimal-reserve"));
    $("headline").tBodies[0].replaceChildren(...rows);
    status.textContent = (revenue.warnings || []).join(" ") || "Up to date.";
    snippets(body, chosen);
    await charts(body, chosen, ticket);
  } catch (e) {
    if (ticket === pending) status.textContent = "Not computed: " + e.message;
  }
}

async function charts(body, chosen, ticket) {
  const urls = await Promise.all(CHARTS.map(async (chart) => {
    let chartBody = Object.assign({}, body, {rules: chosen.filter((r) => r !== "all_pay")});
    if (chart === "top-values") chartBody = {[modelKey()]: body[modelKey()], bidders: body.bidders};
    if (chart === "revenue-by-reserve") delete chartBody.reserve;
    if (chart === "bid-strategy") delete chartBody[ownKey()];
    try {
      return URL.createObjectURL(await post(`/v1/charts/${chart}?width=640&height=400`, chartBody, "image/svg+xml"));
    } catch (e) {
      return null;
    }
  }));
  if (ticket !== pending) { urls.forEach((u) => u && URL.revokeObjectURL(u)); return; }
  shownUrls.forEach((u) => URL.revokeObjectURL(u));
  shownUrls = urls.filter(Boolean);
  CHARTS.forEach((chart, i) => {
    const img = $("chart-" + chart);
    if (urls[i]) img.src = urls[i]; else img.removeAttribute("src");
  });
}

function query(body, extra) {
  const params = new URLSearchParams(extra);
  const m = body[modelKey()];
  if (m && typeof m === "object" && !m.components && !m.table && !m.sample && !m.truncate) {
    for (const [k, v] of Object.entries(m)) params.set(k, v);
  }
  if (direction() === "reverse") params.set("direction", "reverse");
  params.set("bidders", body.bidders);
  for (const k of ["reserve", "seller_value", "buyer_value"]) if (body[k] !== undefined) params.set(k, body[k]);
  return params.toString();
}

function snippets(body, chosen) {
  const origin = window.location.origin, forward = direction() === "forward";
  const metric = forward ? "expected_revenue" : "expected_payment";
  const rule = chosen[0] || "second_price";
  $("formula").value = `=VALUE(WEBSERVICE("${origin}/v1/quote?${query(body, {metric, rule})}"))`;
  const chart = Object.assign({}, body);
  delete chart.reserve;
  $("image-formula").value = `=IMAGE("${origin}/v1/charts/revenue-by-reserve.png?${query(chart, {rules: chosen.join(",")})}")`;
  const key = $("api-key").value.trim() ? " -H 'Authorization: Bearer YOUR_KEY'" : "";
  const json = JSON.stringify(Object.assign({}, body, {rules: chosen}));
  $("curl").value = `curl -s ${origin}/v1/revenue -H 'Content-Type: application/json'${key} -d '${json}'`;
}

async function copy(event) {
  const target = $(event.currentTarget.dataset.copy), text = target.value;
  try {
    await navigator.clipboard.writeText(text);
    event.currentTarget.textContent = "Copied";
  } catch (e) {
    event.currentTarget.textContent = "Select and copy";
  }
  setTimeout(() => { event.currentTarget.textContent = "Copy"; }, 1500);
}

async function fit(event) {
  event.preventDefault();
  const box = $("fit-result");
  box.textContent = "Fitting…";
  $("use-fit").hidden = true;
  const rule = $("past-rule").value;
  const families = rule === "first_price" ? "" : "&families=lognormal,gamma,normal";
  try {
    const resp = await fetch(`/v1/fits?rule=${rule}${families}&direction=${direction()}`, {method: "POST",
      body: $("past-csv").value, headers: headers({"Content-Type": "text/csv", Accept: "application/json"})});
    const answer = await resp.json();
    if (!resp.ok) throw new Error((answer.errors || []).map((e) => e.field + ": " + e.message).join("; ") || answer.detail);
    lastFit = answer[modelKey()] || answer.bidder_values || answer.bidder_costs;
    const table = document.createElement("table"), caption = document.createElement("caption");
    caption.textContent = "Fitted models (the selected one first)";
    table.append(caption);
    const tbody = document.createElement("tbody");
    tbody.append(row("Selected", null, "fit-selected"));
    tbody.lastChild.lastChild.textContent = answer.selected.model;
    tbody.lastChild.lastChild.dataset.value = answer.selected.model;
    for (const c of answer.candidates || []) tbody.append(row(`AIC, ${c.model.family}`, c.aic, `fit-aic-${c.model.family}`));
    table.append(tbody);
    box.replaceChildren(table);
    $("use-fit").hidden = false;
    await fitChart(rule);
  } catch (e) {
    box.textContent = "Not fitted: " + e.message;
  }
}

function records(text) {
  // the panel's simple CSV (a header row, commas, plain numbers) as /v1/fits's JSON records:
  // a row per auction with its price, or a row per bid, gathered by auction
  const lines = text.trim().split(/\r?\n/).map((l) => l.split(",").map((c) => c.trim()));
  const head = lines.shift() || [];
  const rows = lines.filter((l) => l.length === head.length).map((l) => Object.fromEntries(head.map((h, i) => [h, l[i]])));
  if (!head.includes("bid")) return rows.map((r) => ({bidders: Number(r.bidders), price: Number(r.price)}));
  const byAuction = new Map();
  for (const r of rows) {
    if (!byAuction.has(r.auction)) byAuction.set(r.auction, {bidders: Number(r.bidders), bids: []});
    byAuction.get(r.auction).bids.push(Number(r.bid));
  }
  return [...byAuction.values()];
}

async function fitChart(rule) {
  const figure = $("fit-figure");
  figure.hidden = true;
  try {
    const body = {rule, direction: direction(), families: ["lognormal", "gamma", "normal"], auctions: records($("past-csv").value)};
    const blob = await post("/v1/charts/fit?width=640&height=400", body, "image/svg+xml");
    $("chart-fit").src = URL.createObjectURL(blob);
    figure.hidden = false;
  } catch (e) {
    figure.hidden = true;
  }
}

function useFit() {
  if (!lastFit) return;
  $("model-json").value = JSON.stringify(lastFit);
  update();
}

function relabel() {
  const forward = direction() === "forward";
  $("reserve-label").textContent = forward ? "Reserve" : "Maximum price";
  $("own-label").textContent = forward ? "Seller's own value" : "Buyer's own value";
  $("model-legend").textContent = forward ? "Bidders' values" : "Suppliers' costs";
}

let timer = null;
function soon() { clearTimeout(timer); timer = setTimeout(update, 350); }

function start() {
  const select = $("family");
  for (const name of Object.keys(FAMILIES)) select.append(new Option(name, name, false, name === "lognormal"));
  showParams();
  select.addEventListener("change", () => { showParams(); soon(); });
  $("direction").addEventListener("change", () => { relabel(); soon(); });
  $("inputs").addEventListener("input", (e) => { if (e.target.id !== "api-key") soon(); });
  $("inputs").addEventListener("submit", (e) => { e.preventDefault(); update(); });
  $("past").addEventListener("submit", fit);
  $("use-fit").addEventListener("click", useFit);
  for (const b of document.querySelectorAll("button.copy")) b.addEventListener("click", copy);
  relabel();
  update();
}

document.addEventListener("DOMContentLoaded", start);
