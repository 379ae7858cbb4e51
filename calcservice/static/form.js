/* calcservice web form: built from GET v1/calculations; every calculation of the registry appears here. */
"use strict";

(function () {
  const $ = (id) => document.getElementById(id);
  const SVGNS = "http://www.w3.org/2000/svg";
  const NUMBER = /^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$/;
  const UNUM = "(?:\\d+\\.?\\d*|\\.\\d+)(?:[eE][+-]?\\d+)?";
  const CORRELATION = /^\s*([A-Za-z_][\w]*)\s*,\s*([A-Za-z_][\w]*)\s*=\s*([+-]?(?:\d+\.?\d*|\.\d+))\s*$/;
  const SIGMA_PM = new RegExp("^\\+\\s*(" + UNUM + ")\\s*\\/?\\s*[-−]\\s*(" + UNUM + ")$");
  const SIGMA_MP = new RegExp("^[-−]\\s*(" + UNUM + ")\\s*\\/?\\s*\\+\\s*(" + UNUM + ")$");
  // other units a field of each canonical unit commonly comes in (astropy names)
  const UNIT_SUGGESTIONS = {
    "d": ["d", "h", "yr"], "km/s": ["km/s", "m/s"], "deg": ["deg", "rad", "arcmin"],
    "solMass": ["solMass", "jupiterMass", "earthMass", "kg"], "au": ["au", "solRad", "km", "pc"],
    "mas": ["mas", "arcsec", "uas"], "pc": ["pc", "kpc", "lyr"], "kpc": ["kpc", "pc"],
    "solRad": ["solRad", "au", "km"], "solMass/yr": ["solMass/yr"], "mJy": ["mJy", "Jy", "uJy"],
    "GHz": ["GHz", "MHz"], "K": ["K"], "s/yr": ["s/yr", "d/yr"],
  };
  const state = { calcs: [], byName: {}, calc: null, body: null, response: null, reportText: "" };

  // ------------------------------------------------------------------ small DOM helpers
  function el(tag, attrs, children) {
    const e = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (v === undefined || v === null || v === false) continue;
      if (k === "text") e.textContent = v;
      else if (k === "class") e.className = v;
      else e.setAttribute(k, v === true ? "" : String(v));
    }
    for (const c of [].concat(children || [])) if (c !== null && c !== undefined) e.append(c);
    return e;
  }
  function svgEl(tag, attrs, text) {
    const e = document.createElementNS(SVGNS, tag);
    for (const [k, v] of Object.entries(attrs || {})) if (v !== undefined && v !== null) e.setAttribute(k, String(v));
    if (text !== undefined) e.textContent = text;
    return e;
  }
  function clear(node) { while (node.firstChild) node.removeChild(node.firstChild); }
  function show(node, on) { node.hidden = !on; }

  async function request(method, path, body, query) {
    const url = path.replace(/^\//, "") + (query ? "?" + new URLSearchParams(query).toString() : "");
    const opts = { method, headers: { Accept: "application/json, application/problem+json, */*" } };
    if (body !== undefined) {
      opts.headers["Content-Type"] = "application/json";
      opts.body = JSON.stringify(body);
    }
    const r = await fetch(url, opts);
    const ctype = r.headers.get("Content-Type") || "";
    let data;
    if (ctype.includes("json")) data = await r.json();
    else if (ctype.startsWith("image/")) data = await r.blob();
    else data = await r.text();
    return { status: r.status, ok: r.ok, data, ctype };
  }

  // ------------------------------------------------------------------ numbers for print (PDG rule)
  // The three highest digits of the uncertainty: 100-354 keep two significant digits, 355-949 one,
  // 950-999 round up to 1000 and keep two; the value to the same decimal place.  (The server's report
  // rounds in decimal arithmetic; here toFixed's binary rounding can differ on exact ties only.)
  function leading(x) {
    let s = String(Math.abs(x));
    let exp = 0;
    const m = s.match(/^([0-9.]+)e([+-]\d+)$/);
    if (m) { s = m[1]; exp = parseInt(m[2], 10); }
    const [ip, fp = ""] = s.split(".");
    const intDigits = ip.replace(/^0+/, "");
    let lead;
    if (intDigits.length) lead = intDigits.length - 1 + exp;
    else lead = -(fp.match(/^0*/)[0].length) - 1 + exp;
    const digits = (intDigits + fp).replace(/^0+/, "");
    return { three: parseInt((digits + "000").slice(0, 3), 10), lead };
  }
  function pdgPlace(sigma) {
    const { three, lead } = leading(sigma);
    return three <= 354 ? lead - 1 : lead;
  }
  function atPlace(x, place, shift) {
    // x / 10^shift written with its last digit at 10^place
    const scaled = x / Math.pow(10, shift);
    const decimals = Math.max(0, shift - place);
    if (place > shift) {
      const q = Math.pow(10, place - shift);
      return (Math.round(scaled / q) * q).toFixed(0);
    }
    let t = scaled.toFixed(Math.min(decimals, 100));
    if (/^-0(\.0*)?$/.test(t)) t = t.slice(1);
    return t;
  }
  function roundedSigma(sigma, shift) {
    const { three, lead } = leading(sigma);
    if (three >= 950) return atPlace(Math.pow(10, lead + 1), lead, shift);
    return atPlace(sigma, pdgPlace(sigma), shift);
  }
  function exponentFor(x) {
    if (!isFinite(x) || x === 0) return 0;
    const e = leading(x).lead;
    return e >= -3 && e <= 6 ? 0 : e;
  }
  function superscript(n) {
    const map = { "-": "⁻", "0": "⁰", "1": "¹", "2": "²", "3": "³", "4": "⁴", "5": "⁵", "6": "⁶", "7": "⁷", "8": "⁸", "9": "⁹" };
    return String(n).split("").map((c) => map[c] || c).join("");
  }
  function exact(x, digits) {
    if (x === 0) return "0";
    const shift = exponentFor(x);
    let t = (x / Math.pow(10, shift)).toPrecision(digits || 6);
    if (t.includes(".") && !t.includes("e")) t = t.replace(/0+$/, "").replace(/\.$/, "");
    return shift ? t + " × 10" + superscript(shift) : t;
  }
  function measured(entry, digits) {
    const v = entry.value;
    if (typeof v !== "number" || !isFinite(v)) return "—";
    const low = entry.low, high = entry.high;
    if (typeof low === "number" && typeof high === "number" && isFinite(low) && isFinite(high)) {
      const minus = v - low, plus = high - v;
      if (minus > 0 || plus > 0) {
        const small = Math.min(...[minus, plus].filter((s) => s > 0));
        const place = pdgPlace(small);
        const shift = exponentFor(Math.max(Math.abs(v), plus, minus));
        const lo = minus === small ? roundedSigma(minus, shift) : atPlace(minus, place, shift);
        const hi = plus === small ? roundedSigma(plus, shift) : atPlace(plus, place, shift);
        const core = lo === hi ? `${atPlace(v, place, shift)} ± ${hi}` : `${atPlace(v, place, shift)} +${hi} −${lo}`;
        return shift ? `(${core}) × 10${superscript(shift)}` : core;
      }
    }
    const s = entry.sigma;
    if (typeof s === "number" && isFinite(s) && s > 0) {
      const place = pdgPlace(s);
      const shift = exponentFor(Math.max(Math.abs(v), s));
      if (leading(v === 0 ? s : v).lead - place > 15) return exact(v, 16);
      const core = `${atPlace(v, place, shift)} ± ${roundedSigma(s, shift)}`;
      return shift ? `(${core}) × 10${superscript(shift)}` : core;
    }
    return exact(v, digits);
  }
  function fullPrecision(entry) {
    const parts = [`value ${entry.value}`];
    for (const k of ["sigma", "low", "high"]) if (entry[k] !== undefined && entry[k] !== null) parts.push(`${k} ${entry[k]}`);
    return parts.join(", ");
  }

  // ------------------------------------------------------------------ building the form
  function groupOf(calc) {
    const parts = calc.path.split("/").filter(Boolean);
    return parts.length > 2 ? parts[1] : "other";
  }

  function fillCalculations() {
    const select = $("calculation");
    clear(select);
    const groups = {};
    for (const c of state.calcs) (groups[groupOf(c)] = groups[groupOf(c)] || []).push(c);
    for (const [g, list] of Object.entries(groups)) {
      const og = el("optgroup", { label: g });
      for (const c of list) og.append(el("option", { value: c.name, text: `${c.title} (${c.name})` }));
      select.append(og);
    }
  }

  function domainText(spec) {
    const parts = [];
    if (spec.kind === "choice") parts.push("one of " + spec.choices.join(", "));
    else if (spec.domain && spec.domain !== "must be finite") parts.push(spec.domain);
    if (spec.accepts && spec.accepts.includes("isotropic") && !spec.description.includes("isotropic")) parts.push('or "isotropic"');
    if (spec.time) parts.push("JD, or an ISO 8601 date");
    if (spec.default !== undefined) parts.push(`default ${spec.default}`);
    return parts.join("; ");
  }

  function inputRow(spec) {
    const name = spec.name;
    const required = spec.required && spec.default === undefined;
    const wide = spec.kind !== "quantity";
    const row = el("div", { class: "input-row" + (wide ? " wide" : ""), "data-input": name });
    const label = el("label", { class: "name", for: `in-${name}`, text: name });
    if (required) label.append(el("span", { class: "req", title: "required", text: "*" }));
    row.append(label);
    const described = `desc-${name} error-${name}`;
    let control;
    if (spec.kind === "choice") {
      control = el("select", { id: `in-${name}`, class: "value", name, "aria-describedby": described });
      control.append(el("option", { value: "", text: required ? "choose…" : "—" }));
      for (const c of spec.choices) control.append(el("option", { value: c, text: c }));
    } else if (spec.kind === "series") {
      control = el("textarea", { id: `in-${name}`, class: "value", name, rows: 2, "aria-describedby": described,
        placeholder: spec.time ? "2460400.5, 2460500.5, 2024-06-01T00:00 …" : "1.0, 2.0, …" });
    } else if (spec.kind === "integer") {
      control = el("input", { id: `in-${name}`, class: "value", name, type: "number", step: 1, inputmode: "numeric",
        "aria-describedby": described, placeholder: spec.default !== undefined ? String(spec.default) : "" });
    } else {
      control = el("input", { id: `in-${name}`, class: "value", name, type: "text", inputmode: "decimal",
        autocomplete: "off", spellcheck: "false", "aria-describedby": described,
        placeholder: spec.time ? "JD or ISO date" : (spec.accepts ? "value or isotropic" :
          (spec.default !== undefined ? `default ${spec.default}` : "value")) });
    }
    row.append(control);
    if (spec.kind === "quantity") {
      row.append(el("input", { id: `sigma-${name}`, class: "sigma", type: "text", inputmode: "decimal",
        autocomplete: "off", "aria-label": `${name} uncertainty`, placeholder: "± sigma", "aria-describedby": described }));
      const listId = `units-${name}`;
      const unit = el("input", { id: `unit-${name}`, class: "unit", type: "text", autocomplete: "off",
        spellcheck: "false", "aria-label": `${name} unit`, placeholder: spec.unit || "—", list: listId,
        "aria-describedby": described });
      const dl = el("datalist", { id: listId });
      for (const u of UNIT_SUGGESTIONS[spec.unit] || []) dl.append(el("option", { value: u }));
      row.append(unit, dl);
    }
    const unitNote = spec.kind === "choice" || !spec.unit ? "" : ` [${spec.unit}]`;
    row.append(el("p", { class: "desc", id: `desc-${name}`, text: `${spec.description}${unitNote} · ${domainText(spec)}` }));
    row.append(el("p", { class: "field-error", id: `error-${name}`, hidden: true }));
    return row;
  }

  function buildForm(calc) {
    state.calc = calc;
    $("summary").textContent = calc.summary;
    const groups = [];
    for (const g of calc.exactly_one_of || []) groups.push("give exactly one of " + g.join(", "));
    for (const g of calc.at_most_one_of || []) groups.push("at most one of " + g.join(", "));
    $("groups").textContent = groups.length ? groups.join(" · ") : "";
    show($("groups"), groups.length > 0);
    const rows = $("input-rows");
    clear(rows);
    for (const spec of calc.inputs) rows.append(inputRow(spec));
    show($("time-format-row"), calc.inputs.some((i) => i.time));
    $("correlations").value = "";
    clearProblem();
    clear($("results"));
    clear($("plots"));
    show($("warnings"), false);
    show($("report-tools"), false);
    $("status").textContent = "Fill the inputs and press Compute.";
  }

  function selectCalculation(name) {
    const calc = state.byName[name] || state.calcs[0];
    $("calculation").value = calc.name;
    if (location.hash !== "#" + calc.name) history.replaceState(null, "", "#" + calc.name);
    buildForm(calc);
  }

  // ------------------------------------------------------------------ the request
  function parseSigma(text) {
    let m = text.match(SIGMA_PM);
    if (m) return { sigma_plus: Number(m[1]), sigma_minus: Number(m[2]) };
    m = text.match(SIGMA_MP);
    if (m) return { sigma_minus: Number(m[1]), sigma_plus: Number(m[2]) };
    const t = text.replace(/^(\+-|\+\/-|±)\s*/, "");
    if (NUMBER.test(t) && Number(t) >= 0) return { sigma: Number(t) };
    return null;
  }

  function collect() {
    const calc = state.calc;
    const body = {};
    const local = {};
    for (const spec of calc.inputs) {
      const name = spec.name;
      const v = $(`in-${name}`).value.trim();
      if (spec.kind === "choice") { if (v) body[name] = v; continue; }
      if (spec.kind === "integer") {
        if (!v) continue;
        if (!/^[+-]?\d+$/.test(v)) { local[name] = ["must be a whole number"]; continue; }
        body[name] = parseInt(v, 10);
        continue;
      }
      if (spec.kind === "series") {
        if (!v) continue;
        body[name] = v.split(/[\s,;]+/).filter(Boolean).map((p) => (NUMBER.test(p) ? Number(p) : p));
        continue;
      }
      const s = $(`sigma-${name}`).value.trim();
      const u = $(`unit-${name}`).value.trim();
      if (!v) {
        if (s || u) local[name] = ["a sigma or a unit needs a value"];
        continue;
      }
      const value = NUMBER.test(v) ? Number(v) : v;
      if (!s && !u) { body[name] = value; continue; }
      const q = { value };
      if (s) {
        const parsed = parseSigma(s);
        if (!parsed) { local[name] = ["sigma must be a number >= 0, or +plus −minus (e.g. +0.3 -0.1)"]; continue; }
        Object.assign(q, parsed);
      }
      if (u) q.unit = u;
      body[name] = q;
    }
    const method = document.querySelector('input[name="method"]:checked').value;
    if (method === "monte_carlo") {
      const unc = { method };
      const n = $("samples").value.trim();
      const seed = $("seed").value.trim();
      if (n) unc.samples = Number(n);
      if (seed) unc.seed = Number(seed);
      body.uncertainty = unc;
    }
    if (calc.inputs.some((i) => i.time) && $("time_format").value === "mjd") body.time_format = "mjd";
    const corr = $("correlations").value.trim();
    if (corr) {
      const list = [];
      for (const part of corr.split(/[;\n]+/).filter((p) => p.trim())) {
        const m = part.match(CORRELATION);
        if (!m) { local.correlations = [`${part.trim()}: write NAME1,NAME2=RHO, several separated by ;`]; break; }
        list.push({ between: [m[1], m[2]], rho: Number(m[3]) });
      }
      body.correlations = list;
    }
    return { body, local };
  }

  function clearProblem() {
    show($("problem"), false);
    clear($("problem"));
    for (const e of document.querySelectorAll(".field-error")) { e.textContent = ""; e.hidden = true; }
    for (const e of document.querySelectorAll("[aria-invalid]")) e.removeAttribute("aria-invalid");
  }

  function showProblem(problem) {
    const errors = problem.errors || {};
    const general = [];
    let first = null;
    for (const [key, messages] of Object.entries(errors)) {
      const base = key.split(".")[0];
      const text = [].concat(messages).join(" ");
      const target = $(`error-${base}`);
      if (target && state.calc.inputs.some((i) => i.name === base)) {
        target.textContent = key === base ? text : `${key.slice(base.length + 1)}: ${text}`;
        target.hidden = false;
        for (const prefix of ["in", "sigma", "unit"]) {
          const c = $(`${prefix}-${base}`);
          if (c) c.setAttribute("aria-invalid", "true");
        }
        first = first || $(`in-${base}`);
      } else if (base === "uncertainty" || base === "correlations") {
        const box = $(`error-${base}`);
        box.textContent = (box.hidden ? "" : box.textContent + " ") + (key === base ? text : `${key}: ${text}`);
        box.hidden = false;
        first = first || $(base === "correlations" ? "correlations" : "samples");
      } else {
        general.push(`${key}: ${text}`);
      }
    }
    const box = $("problem");
    clear(box);
    box.append(el("strong", { text: problem.title || "Error" }), document.createTextNode(" " + (problem.detail || "")));
    if (general.length) box.append(el("ul", {}, general.map((g) => el("li", { text: g }))));
    show(box, true);
    if (first) first.focus({ preventScroll: false });
  }

  async function compute(event) {
    if (event) event.preventDefault();
    clearProblem();
    const { body, local } = collect();
    if (Object.keys(local).length) {
      showProblem({ title: "Invalid input", detail: "fix the marked fields", errors: local });
      $("status").textContent = "Not sent: some fields need fixing.";
      return;
    }
    state.body = body;
    $("status").textContent = "Computing";
    $("status").classList.add("busy");
    $("compute").disabled = true;
    try {
      const r = await request("POST", state.calc.path, body);
      if (!r.ok) {
        const problem = typeof r.data === "object" ? r.data : { title: `HTTP ${r.status}`, detail: String(r.data) };
        showProblem(problem);
        clear($("results"));
        clear($("plots"));
        show($("warnings"), false);
        show($("report-tools"), false);
        $("status").textContent = `The service refused the request (${r.status}).`;
        return;
      }
      state.response = r.data;
      renderResponse(state.calc, r.data);
      await drawPlots(state.calc, r.data, body);
    } catch (err) {
      showProblem({ title: "No answer", detail: String(err) });
      $("status").textContent = "The service could not be reached.";
    } finally {
      $("status").classList.remove("busy");
      $("compute").disabled = false;
    }
  }

  // ------------------------------------------------------------------ results
  function isMeasured(x) {
    return x && typeof x === "object" && "value" in x && "unit" in x && !Array.isArray(x.value) && typeof x.value !== "object";
  }

  function renderResponse(calc, response) {
    const out = $("results");
    clear(out);
    const unc = response.uncertainty || {};
    const mc = unc.method === "monte_carlo";
    $("status").textContent = mc
      ? `Monte Carlo: ${unc.samples} draws, seed ${unc.seed}, ${(100 * (unc.rejected_fraction || 0)).toFixed(2)} % rejected; median and central 68.27 % interval.`
      : "Linear propagation (first order" + ((state.body || {}).correlations ? ", with the correlations given" : "") + ").";
    const outputs = Object.fromEntries(calc.outputs.map((o) => [o.name, o]));
    const results = response.results || {};
    const rows = [];
    for (const [name, entry] of Object.entries(results)) {
      if (!isMeasured(entry)) continue;
      const tr = el("tr", { "data-output": name }, [
        el("td", { class: "name", text: name }),
        el("td", { class: "value", title: fullPrecision(entry), text: measured(entry) }),
        el("td", { class: "unit", text: entry.unit || "" }),
        el("td", { class: "desc", text: outputs[name] ? outputs[name].description : "" }),
      ]);
      if (mc) {
        const b = el("button", { type: "button", class: "histogram", text: "histogram", title: `download the histogram of ${name} (SVG)` });
        b.addEventListener("click", () => downloadFigure("svg", name));
        tr.append(el("td", {}, b));
      }
      rows.push(tr);
    }
    if (rows.length) {
      const head = el("tr", {}, ["result", "value", "unit", "description"].concat(mc ? [""] : []).map((h) => el("th", { text: h })));
      out.append(el("table", { class: "results", id: "results-table" }, [el("thead", {}, head), el("tbody", {}, rows)]));
    }
    if (results.series) out.append(seriesTable(results.series));
    for (const [key, member] of Object.entries(results)) {
      if (key === "series" || isMeasured(member) || !member || typeof member !== "object") continue;
      out.append(eventLists(key, member));
    }
    const warnings = $("warnings");
    clear(warnings);
    for (const w of response.warnings || []) {
      warnings.append(el("li", { "data-code": w.code }, [el("code", { text: w.code }), document.createTextNode(" " + w.message)]));
    }
    show(warnings, (response.warnings || []).length > 0);
    show($("report-tools"), true);
    show($("report"), false);
    $("copy-report").disabled = true;
    show($("copy-status"), false);
    const figures = calc.outputs.some((o) => o.name === "rv1") && calc.inputs.some((i) => i.kind === "series");
    show($("figure-svg"), figures);
    show($("figure-png"), figures);
  }

  function seriesTable(series) {
    const names = Object.keys(series).filter((k) => series[k] && Array.isArray(series[k].value));
    const n = Math.max(0, ...names.map((k) => series[k].value.length));
    const head = el("tr", {}, names.map((k) => el("th", { text: series[k].unit ? `${k} [${series[k].unit}]` : k })));
    const body = [];
    for (let i = 0; i < n; i++) {
      body.push(el("tr", {}, names.map((k) => {
        const s = series[k];
        const entry = { value: s.value[i] };
        for (const m of ["sigma", "low", "high"]) if (Array.isArray(s[m])) entry[m] = s[m][i];
        return el("td", { title: fullPrecision(entry), text: measured(entry, k === "times" || k === "time" ? 12 : 6) });
      })));
    }
    return el("div", { class: "scroll" }, [
      el("h3", { text: "Series" }),
      el("table", { class: "results series", id: "series-table" }, [el("thead", {}, head), el("tbody", {}, body)]),
    ]);
  }

  function eventLists(key, member) {
    const box = el("div", { class: "events", "data-member": key });
    const unit = member.unit || "";
    for (const [sub, entries] of Object.entries(member)) {
      if (!Array.isArray(entries) || !entries.length || typeof entries[0] !== "object") continue;
      const keys = Object.keys(entries[0]).filter((k) => !["value", "sigma", "low", "high"].includes(k));
      const head = el("tr", {}, [el("th", { text: unit ? `date [${unit}]` : "date" })].concat(keys.map((k) => el("th", { text: k }))));
      const rows = entries.map((e) => el("tr", {}, [el("td", { class: "value", title: fullPrecision(e), text: measured(e, 12) })]
        .concat(keys.map((k) => el("td", { text: typeof e[k] === "number" ? exact(e[k], 6) : String(e[k] ?? "") })))));
      box.append(el("h3", { text: `${key}: ${sub.replace(/_/g, " ")}` }),
        el("table", { class: "results" }, [el("thead", {}, head), el("tbody", {}, rows)]));
    }
    return box;
  }

  // ------------------------------------------------------------------ plots (SVG drawn here, from the series)
  function value(inputs, name) {
    const e = inputs[name];
    return e && typeof e.value === "number" && isFinite(e.value) ? e.value : null;
  }

  function denseTimes(times, period, t0, ecc) {
    const lo = Math.min(...times), hi = Math.max(...times);
    if (!(period > 0)) {
      const pad = Math.max(hi - lo, 1) * 0.05;
      return { grid: linspace(lo - pad, hi + pad, 800), mode: "time" };
    }
    t0 = t0 === null ? lo : t0;
    const e = Math.min(Math.max(ecc || 0, 0), 0.999);
    // points evenly spaced in eccentric anomaly sample a quick periastron passage as well as apastron
    const atE = (cycle, E) => t0 + period * (cycle + (E - e * Math.sin(E)) / (2 * Math.PI));
    if (hi - lo > 3 * period) {
      return { grid: linspace(0, 2 * Math.PI, 481).map((E) => atE(0, E)), mode: "phase" };
    }
    let a = lo, b = hi;
    if (b - a < period) { const mid = (a + b) / 2; a = mid - period / 2; b = mid + period / 2; }
    else { const pad = 0.03 * (b - a); a -= pad; b += pad; }
    const grid = [];
    for (let c = Math.floor((a - t0) / period); c <= Math.ceil((b - t0) / period); c++) {
      for (const E of linspace(0, 2 * Math.PI, 360, false)) { const t = atE(c, E); if (t >= a && t <= b) grid.push(t); }
    }
    for (const t of linspace(a, b, 200)) grid.push(t);
    grid.sort((x, y) => x - y);
    return { grid, mode: "time" };
  }
  function linspace(a, b, n, endpoint = true) {
    const out = [];
    const d = endpoint ? (b - a) / (n - 1) : (b - a) / n;
    for (let i = 0; i < n; i++) out.push(a + i * d);
    return out;
  }

  function nominalBody(calc, response, grid, requestBody) {
    const b = {};
    for (const spec of calc.inputs) {
      const e = (response.inputs || {})[spec.name];
      if (spec.kind === "series" && spec.time) { b[spec.name] = grid; continue; }
      if (!e || e.default) continue;
      if (spec.kind === "choice" || spec.kind === "integer") b[spec.name] = e.value;
      else if (e.value === "isotropic") { b[spec.name] = "isotropic"; b.uncertainty = { method: "monte_carlo", samples: 64, seed: 1 }; }
      else if (spec.kind === "quantity") b[spec.name] = e.value;
    }
    if (requestBody.units) b.units = requestBody.units;
    if (response.time_format) b.time_format = response.time_format;   // the echoed times are in it
    return b;
  }

  async function drawPlots(calc, response, body) {
    const box = $("plots");
    clear(box);
    const series = (response.results || {}).series;
    const timeInput = calc.inputs.find((i) => i.kind === "series" && i.time);
    if (!series || !timeInput || !series.rv1) return;
    // a series input's values come back under its label (e.g. "time" for the input "times")
    const key = [timeInput.label, timeInput.name, "time"].find((k) => k && series[k]);
    if (!key) return;
    const times = series[key].value;
    const inputs = response.inputs || {};
    const period = value(inputs, "period");
    const { grid, mode } = denseTimes(times, period, value(inputs, "t_periastron"), value(inputs, "eccentricity"));
    const r = await request("POST", calc.path, nominalBody(calc, response, grid, body));
    if (!r.ok || !r.data.results || !r.data.results.series) return;
    const dense = r.data.results.series;
    let xDense, xPoints, xlabel, xlim = null;
    if (mode === "phase") {
      const order = dense.phase.value.map((p, i) => [p, i]).sort((a, b) => a[0] - b[0]).map((x) => x[1]);
      for (const k of Object.keys(dense)) dense[k].value = order.map((i) => dense[k].value[i]);
      xDense = dense.phase.value;
      xPoints = series.phase.value;
      xlabel = "orbital phase since periastron";
      xlim = [0, 1];
    } else {
      const offset = Math.min(...grid) > 1e5 ? Math.floor(Math.min(...grid) / 1e4) * 1e4 : 0;
      xDense = dense[key].value.map((t) => t - offset);
      xPoints = times.map((t) => t - offset);
      xlabel = offset ? `JD − ${offset} [d]` : "JD [d]";
    }
    const lines = [], points = [];
    ["rv1", "rv2"].forEach((key, k) => {
      if (!dense[key] || !series[key]) return;
      const cls = `star${k + 1}`;
      lines.push({ x: xDense, y: dense[key].value, cls, label: `star ${k + 1} (${key})` });
      points.push({ x: xPoints, y: series[key].value, err: errorsOf(series[key]), cls, label: `requested (${key})` });
    });
    const rvUnit = series.rv1.unit || "";
    const gamma = value(inputs, "gamma");
    const hlines = gamma !== null && !inputs.gamma.default && (inputs.gamma.unit || rvUnit) === rvUnit ? [{ y: gamma, cls: "gamma", label: "systemic velocity" }] : [];
    const fig1 = chart({ width: 640, height: 360, xlabel, ylabel: `radial velocity [${rvUnit}]`, lines, points, hlines, xlim,
      title: "radial velocities (positive receding)", id: "rv-plot" });
    box.append(el("figure", { class: "wide" }, [fig1, el("figcaption", { text: `${calc.title}: curves from the nominal elements; points at the requested times with their 1σ errors.` })]));
    if (dense.position_angle && dense.projected_separation && series.position_angle && series.projected_separation) {
      const sky = (s) => s.projected_separation.value.map((rho, i) => {
        const pa = (s.position_angle.value[i] * Math.PI) / 180;
        return [rho * Math.sin(pa), rho * Math.cos(pa)];
      });
      const d = sky(dense), p = sky(series);
      const unit = dense.projected_separation.unit || "";
      const fig2 = chart({ width: 360, height: 360, xlabel: `east offset [${unit}]`, ylabel: `north offset [${unit}]`,
        lines: [{ x: d.map((q) => q[0]), y: d.map((q) => q[1]), cls: "sky", label: "star 2 about star 1" }],
        points: [{ x: p.map((q) => q[0]), y: p.map((q) => q[1]), cls: "sky", label: "requested" }],
        marks: periastronMark(dense, d),
        origin: true, invertX: true, equal: true, title: "relative orbit (north up, east left)", id: "orbit-plot" });
      box.append(el("figure", { class: "square" }, [fig2, el("figcaption", { text: "Star 2 relative to star 1 on the sky; the square marks periastron." })]));
    }
  }

  function periastronMark(dense, sky) {
    // periastron: where the separation in units of a is smallest along the dense curve
    const sep = dense.separation ? dense.separation.value : null;
    if (!sep) return [];
    let k = -1;
    sep.forEach((v, i) => { if (typeof v === "number" && (k < 0 || v < sep[k])) k = i; });
    return k < 0 ? [] : [{ x: sky[k][0], y: sky[k][1], cls: "periastron" }];
  }

  function errorsOf(s) {
    if (Array.isArray(s.low) && Array.isArray(s.high)) return s.value.map((v, i) => [v - s.low[i], s.high[i] - v]);
    if (Array.isArray(s.sigma)) return s.sigma.map((x) => [x, x]);
    return null;
  }

  function niceTicks(lo, hi, n) {
    const span = hi - lo || Math.abs(hi) || 1;
    const raw = span / (n || 6);
    const mag = Math.pow(10, Math.floor(Math.log10(raw)));
    const f = raw / mag;
    const step = (f < 1.5 ? 1 : f < 3 ? 2 : f < 7 ? 5 : 10) * mag;
    const ticks = [];
    for (let t = Math.ceil(lo / step) * step; t <= hi + step * 1e-9; t += step) ticks.push(Number(t.toPrecision(12)));
    return ticks;
  }

  function chart(o) {
    const W = o.width, H = o.height, m = { l: 62, r: 14, t: 26, b: 44 };
    const finite = (a) => a.filter((v) => typeof v === "number" && isFinite(v));
    let xs = [], ys = [];
    for (const l of o.lines) { xs = xs.concat(finite(l.x)); ys = ys.concat(finite(l.y)); }
    for (const p of o.points) {
      xs = xs.concat(finite(p.x));
      p.y.forEach((y, i) => { if (typeof y === "number" && isFinite(y)) { const e = p.err && p.err[i] ? p.err[i] : [0, 0]; ys.push(y - (e[0] || 0), y + (e[1] || 0)); } });
    }
    for (const h of o.hlines || []) ys.push(h.y);
    if (o.origin) { xs.push(0); ys.push(0); }
    let [x0, x1] = o.xlim || [Math.min(...xs), Math.max(...xs)];
    let y0 = Math.min(...ys), y1 = Math.max(...ys);
    const padY = (y1 - y0 || 1) * 0.06; y0 -= padY; y1 += padY;
    if (!o.xlim) { const padX = (x1 - x0 || 1) * 0.03; x0 -= padX; x1 += padX; }
    const pw = W - m.l - m.r, ph = H - m.t - m.b;
    if (o.equal) {
      const sx = (x1 - x0) / pw, sy = (y1 - y0) / ph, s = Math.max(sx, sy);
      const cx = (x0 + x1) / 2, cy = (y0 + y1) / 2;
      x0 = cx - (s * pw) / 2; x1 = cx + (s * pw) / 2; y0 = cy - (s * ph) / 2; y1 = cy + (s * ph) / 2;
    }
    const X = (x) => (o.invertX ? m.l + ((x1 - x) / (x1 - x0)) * pw : m.l + ((x - x0) / (x1 - x0)) * pw);
    const Y = (y) => m.t + ((y1 - y) / (y1 - y0)) * ph;
    const svg = svgEl("svg", { class: "plot", viewBox: `0 0 ${W} ${H}`, role: "img", "aria-label": o.title, id: o.id });
    svg.append(svgEl("title", {}, o.title));
    const grid = svgEl("g", { class: "tick" });
    for (const t of niceTicks(Math.min(x0, x1), Math.max(x0, x1), W > 500 ? 8 : 5)) {
      grid.append(svgEl("line", { class: "grid", x1: X(t), x2: X(t), y1: m.t, y2: m.t + ph }));
      grid.append(svgEl("text", { x: X(t), y: m.t + ph + 15, "text-anchor": "middle" }, fmtTick(t)));
    }
    for (const t of niceTicks(y0, y1, 6)) {
      grid.append(svgEl("line", { class: "grid", x1: m.l, x2: m.l + pw, y1: Y(t), y2: Y(t) }));
      grid.append(svgEl("text", { x: m.l - 6, y: Y(t) + 4, "text-anchor": "end" }, fmtTick(t)));
    }
    svg.append(grid);
    svg.append(svgEl("rect", { class: "axis", x: m.l, y: m.t, width: pw, height: ph }));
    const clipId = `${o.id}-clip`;
    const defs = svgEl("defs");
    const cp = svgEl("clipPath", { id: clipId });
    cp.append(svgEl("rect", { x: m.l, y: m.t, width: pw, height: ph }));
    defs.append(cp);
    svg.append(defs);
    const plot = svgEl("g", { "clip-path": `url(#${clipId})` });
    for (const h of o.hlines || []) plot.append(svgEl("line", { class: h.cls, x1: m.l, x2: m.l + pw, y1: Y(h.y), y2: Y(h.y) }));
    for (const l of o.lines) {
      let d = "", pen = false;
      l.x.forEach((x, i) => {
        const y = l.y[i];
        if (typeof x !== "number" || typeof y !== "number" || !isFinite(x) || !isFinite(y)) { pen = false; return; }
        d += `${pen ? "L" : "M"}${X(x).toFixed(2)},${Y(y).toFixed(2)}`;
        pen = true;
      });
      plot.append(svgEl("path", { class: `curve ${l.cls}`, d }));
    }
    for (const p of o.points) {
      const g = svgEl("g", { class: `points ${p.cls}` });
      p.x.forEach((x, i) => {
        const y = p.y[i];
        if (typeof y !== "number" || !isFinite(y)) return;
        const e = p.err && p.err[i];
        if (e && (e[0] > 0 || e[1] > 0)) {
          g.append(svgEl("path", { class: `errbar ${p.cls}`, d: `M${X(x)},${Y(y - e[0])}V${Y(y + e[1])}M${X(x) - 3},${Y(y - e[0])}h6M${X(x) - 3},${Y(y + e[1])}h6` }));
        }
        g.append(svgEl("circle", { class: `point ${p.cls}`, cx: X(x), cy: Y(y), r: 4 }));
      });
      plot.append(g);
    }
    if (o.origin) plot.append(svgEl("path", { class: "primary-star", d: star(X(0), Y(0), 7) }));
    for (const mk of o.marks || []) plot.append(svgEl("rect", { class: mk.cls, x: X(mk.x) - 4, y: Y(mk.y) - 4, width: 8, height: 8 }));
    svg.append(plot);
    svg.append(svgEl("text", { class: "label", x: m.l + pw / 2, y: H - 8, "text-anchor": "middle" }, o.xlabel));
    svg.append(svgEl("text", { class: "label", x: 14, y: m.t + ph / 2, "text-anchor": "middle", transform: `rotate(-90 14 ${m.t + ph / 2})` }, o.ylabel));
    svg.append(svgEl("text", { class: "label", x: m.l, y: 16 }, o.title));
    const legend = svgEl("g", { class: "legend" });
    const entries = o.lines.map((l) => ({ cls: l.cls, label: l.label, kind: "line" }))
      .concat(o.points.map((p) => ({ cls: p.cls, label: p.label, kind: "point" })))
      .concat((o.hlines || []).map((h) => ({ cls: h.cls, label: h.label, kind: "hline" })));
    legend.append(svgEl("rect", { class: "legend-box", x: m.l + pw - 156, y: m.t + 3, width: 152, height: entries.length * 14 + 6, rx: 3 }));
    entries.forEach((e, i) => {
      const y = m.t + 12 + i * 14, x = m.l + pw - 150;
      if (e.kind === "point") legend.append(svgEl("circle", { class: `point ${e.cls}`, cx: x + 9, cy: y - 4, r: 3.5 }));
      else legend.append(svgEl("line", { class: e.kind === "hline" ? e.cls : `curve ${e.cls}`, x1: x, x2: x + 18, y1: y - 4, y2: y - 4 }));
      legend.append(svgEl("text", { x: x + 24, y }, e.label));
    });
    svg.append(legend);
    return svg;
  }
  function fmtTick(t) { return Math.abs(t) >= 1e5 || (Math.abs(t) < 1e-3 && t !== 0) ? t.toExponential(1) : String(Number(t.toPrecision(6))); }
  function star(cx, cy, r) {
    let d = "";
    for (let k = 0; k < 10; k++) {
      const a = -Math.PI / 2 + (k * Math.PI) / 5, rr = k % 2 ? r * 0.45 : r;
      d += `${k ? "L" : "M"}${(cx + rr * Math.cos(a)).toFixed(2)},${(cy + rr * Math.sin(a)).toFixed(2)}`;
    }
    return d + "Z";
  }

  // ------------------------------------------------------------------ report and figures
  async function loadReport(format) {
    if (!state.body) return;
    const r = await request("POST", state.calc.path, state.body, { format });
    const area = $("report");
    if (!r.ok) { showProblem(typeof r.data === "object" ? r.data : { title: "Error", detail: String(r.data) }); return; }
    state.reportText = r.data;
    area.value = r.data;
    area.dataset.format = format;
    show(area, true);
    $("copy-report").disabled = false;
    $("copy-status").textContent = `${format === "latex" ? "LaTeX" : "Markdown"} report ready: press Copy, or select the text.`;
    show($("copy-status"), true);
  }

  async function copyReport() {
    const area = $("report");
    let done = false;
    try {
      if (navigator.clipboard && window.isSecureContext) { await navigator.clipboard.writeText(area.value); done = true; }
    } catch (e) { done = false; }
    if (!done) {
      area.focus();
      area.select();
      try { done = document.execCommand("copy"); } catch (e) { done = false; }
    }
    $("copy-status").textContent = done ? "Copied to the clipboard." : "Select the text and copy it (the browser refused).";
    show($("copy-status"), true);
  }

  async function downloadFigure(format, plot) {
    if (!state.body) return;
    const query = { format };
    if (plot) query.plot = plot;
    const r = await request("POST", state.calc.path, state.body, query);
    if (!r.ok) { showProblem(typeof r.data === "object" ? r.data : { title: "Error", detail: String(r.data) }); return; }
    const url = URL.createObjectURL(r.data);
    const a = el("a", { href: url, download: `${state.calc.name}${plot ? "-" + plot : ""}.${format}` });
    document.body.append(a);
    a.click();
    a.remove();
    setTimeout(() => URL.revokeObjectURL(url), 10000);
  }

  // ------------------------------------------------------------------ example and wiring
  function fillExample() {
    const calc = state.calc;
    buildForm(calc);
    const ex = calc.example || {};
    for (const [name, v] of Object.entries(ex)) {
      if (name === "uncertainty" && v && v.method) {
        $(v.method.startsWith("monte") ? "method-mc" : "method-linear").checked = true;
        toggleMethod();
        continue;
      }
      if (name === "correlations") {
        $("correlations").value = v.map((c) => `${c.between[0]},${c.between[1]}=${c.rho}`).join("; ");
        continue;
      }
      if (name === "time_format") { $("time_format").value = v; continue; }
      const input = $(`in-${name}`);
      if (!input) continue;
      if (Array.isArray(v)) input.value = v.join(", ");
      else if (v && typeof v === "object") {
        input.value = v.value !== undefined ? String(v.value) : "";
        const sig = $(`sigma-${name}`), unit = $(`unit-${name}`);
        if (sig && v.sigma !== undefined) sig.value = String(v.sigma);
        if (sig && v.sigma_plus !== undefined) sig.value = `+${v.sigma_plus} -${v.sigma_minus}`;
        if (unit && v.unit) unit.value = v.unit;
      } else input.value = String(v);
    }
    $("status").textContent = "Example filled in (a fictional system). Press Compute.";
  }

  function toggleMethod() {
    show($("mc-options"), $("method-mc").checked);
  }

  async function init() {
    $("calc-form").addEventListener("submit", compute);
    $("calculation").addEventListener("change", (e) => selectCalculation(e.target.value));
    $("example").addEventListener("click", fillExample);
    $("clear").addEventListener("click", () => buildForm(state.calc));
    for (const r of document.querySelectorAll('input[name="method"]')) r.addEventListener("change", toggleMethod);
    $("report-latex").addEventListener("click", () => loadReport("latex"));
    $("report-markdown").addEventListener("click", () => loadReport("markdown"));
    $("copy-report").addEventListener("click", copyReport);
    $("figure-svg").addEventListener("click", () => downloadFigure("svg"));
    $("figure-png").addEventListener("click", () => downloadFigure("png"));
    window.addEventListener("hashchange", () => {
      const name = location.hash.slice(1);
      if (state.byName[name] && (!state.calc || state.calc.name !== name)) selectCalculation(name);
    });
    try {
      const [health, listing] = await Promise.all([request("GET", "v1/health"), request("GET", "v1/calculations")]);
      if (health.ok) $("version").textContent = `version ${health.data.version}`;
      state.calcs = listing.data.calculations;
      state.byName = Object.fromEntries(state.calcs.map((c) => [c.name, c]));
      fillCalculations();
      selectCalculation(location.hash.slice(1));
      document.body.dataset.ready = "true";
    } catch (err) {
      showProblem({ title: "No answer", detail: `cannot load the calculations: ${err}` });
    }
  }

  document.addEventListener("DOMContentLoaded", init);
})();
