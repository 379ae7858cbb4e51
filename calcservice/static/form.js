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
    "GHz": ["GHz", "MHz"], "K": ["K", "keV", "eV"], "s/yr": ["s/yr", "d/yr"],
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

  // ------------------------------------------------------------------ maths as maths
  // The declarations write formulas as plain text ("M1 sin^3 i", "(1 - e^2)^{3/2}", "Mdot2", "Gamma_e");
  // here they become text nodes with real superscripts, subscripts and Greek letters (no HTML parsing).
  const GREEK = {
    alpha: "α", beta: "β", gamma: "γ", Gamma: "Γ", delta: "δ", Delta: "Δ", epsilon: "ε", zeta: "ζ", eta: "η",
    theta: "θ", kappa: "κ", lambda: "λ", mu: "μ", nu: "ν", xi: "ξ", pi: "π", rho: "ρ", sigma: "σ", tau: "τ",
    phi: "φ", chi: "χ", psi: "ψ", omega: "ω", Omega: "Ω",
  };
  const WORDS = { Mdot: "Ṁ", Pdot: "Ṗ", sqrt: "√", sun: "⊙" };
  const SYMBOLS = [["<=", "≤"], [">=", "≥"], [">~", "≳"], ["<~", "≲"], ["''", "″"], ["+-", "±"]];
  function mathNodes(text) {
    const out = [];
    let plain = "";
    const flush = () => { if (plain) { out.push(document.createTextNode(plain)); plain = ""; } };
    let i = 0;
    const group = (start) => {
      // the argument of ^ or _: {...} or (...) balanced, else a run of letters/digits (one word)
      const open = text[start];
      if (open === "{" || open === "(") {
        const close = open === "{" ? "}" : ")";
        let depth = 0;
        for (let j = start; j < text.length; j++) {
          if (text[j] === open) depth++;
          else if (text[j] === close && --depth === 0) return { inner: text.slice(start + 1, j), end: j + 1 };
        }
        return null;
      }
      const m = text.slice(start).match(/^(-?[0-9.]+|[A-Za-z]+)/);
      return m ? { inner: m[1], end: start + m[1].length } : null;
    };
    while (i < text.length) {
      const c = text[i];
      // "_" subscripts a symbol ("T_periastron", "Gamma_e", "GM_sun"), not a word ("semimajor_axis")
      const base = c === "_" ? text.slice(0, i).match(/(?:^|[^A-Za-z])([A-Za-z]+)$/) : null;
      const symbolic = c === "^" || (base && (base[1].length <= 2 || GREEK[base[1]] || WORDS[base[1]]));
      if ((c === "^" || c === "_") && i > 0 && symbolic) {
        const g = group(i + 1);
        if (g) {
          flush();
          out.push(el(c === "^" ? "sup" : "sub", {}, mathNodes(g.inner)));
          i = g.end;
          continue;
        }
      }
      const power = /[\d]/.test(c) && !/[A-Za-z0-9_.]/.test(i > 0 ? text[i - 1] : " ")
        ? text.slice(i).match(/^(\d+(?:\.\d+)?)e([+-]?\d+)(?![\w.])/) : null;
      if (power) {          // 1e12 -> 10¹², 2.5e-7 -> 2.5 × 10⁻⁷
        plain += (power[1] === "1" ? "" : power[1] + " × ") + "10";
        flush();
        out.push(el("sup", { text: power[2].replace(/^\+/, "").replace("-", "−") }));
        i += power[0].length;
        continue;
      }
      const sym = SYMBOLS.find(([a]) => text.startsWith(a, i));
      if (sym) { plain += sym[1]; i += sym[0].length; continue; }
      if (c === "-" && (i === 0 || /[\s({=^]/.test(text[i - 1])) && /[\s\d.(A-Za-z]/.test(text[i + 1] || "")) {
        plain += "−"; i++; continue;
      }
      const prev = i > 0 ? text[i - 1] : " ";
      if (/[A-Za-z]/.test(c) && !/[A-Za-z0-9_]/.test(prev)) {
        const m = text.slice(i).match(/^([A-Za-z]+)(\d*)(?![A-Za-z])/);
        if (m) {
          const [word, letters, digits] = m;
          const symbol = GREEK[letters] || WORDS[letters];
          const short = symbol || letters.length === 1 || letters === "log";
          plain += symbol || letters;
          if (digits && short) { flush(); out.push(el("sub", { text: digits })); }
          else plain += digits;
          i += word.length;
          continue;
        }
        const w = text.slice(i).match(/^[A-Za-z]+/)[0];   // a word run into digits and letters (e.g. "vink-2001a")
        plain += w; i += w.length; continue;
      }
      plain += c; i++;
    }
    flush();
    return out;
  }
  // a message naming fields ("t_periastron: an MJD of ..."): each name as code, as the form labels it (typeset,
  // t_periastron would read "t" with a subscript, a field the visitor cannot find), the rest typeset
  function namedMath(text, names, cls) {
    const list = (Array.isArray(names) ? names : []).filter((n) => typeof n === "string" && n)
      .sort((a, b) => b.length - a.length).map((n) => n.replace(/[.*+?^${}()|[\]\\]/g, "\\$&"));
    if (!list.length) return math(text, cls);
    const parts = text.split(new RegExp(`(?<![\\w])(${list.join("|")})(?![\\w])`));
    return el("span", { class: "math" + (cls ? " " + cls : ""), title: text },
      parts.flatMap((p, i) => (i % 2 ? [el("code", { text: p })] : p ? mathNodes(p) : [])));
  }
  // a declaration's text naming the calculation's fields, by the rule of the LaTeX report and /docs
  // (report.field_parts): a name with an underscore or a digit (m2, omega_primary) is the field's name in a
  // description, only one with an underscore in a formula (written in symbols: a1 sin i, K1)
  function declared(calc, text, formula, cls) {
    const names = calc ? [...calc.inputs, ...calc.outputs].map((f) => f.name)
      .filter((n) => n.includes("_") || (!formula && /\d/.test(n))) : [];
    return namedMath(text, names, cls);
  }
  function math(text, cls) { return el("span", { class: "math" + (cls ? " " + cls : ""), title: text }, mathNodes(text)); }

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
      for (const c of list) og.append(el("option", { value: c.name, text: `${c.name}: ${c.title}` }));
      select.append(og);
    }
  }

  // a declared default as a person reads it: six significant digits (the JSON keeps every digit)
  function defaultText(v) { return typeof v === "number" ? String(Number(v.toPrecision(6))) : String(v); }

  function domainText(spec) {
    const parts = [];
    if (spec.kind === "choice") parts.push("one of " + spec.choices.join(", "));
    else if (spec.domain && spec.domain !== "must be finite") parts.push(spec.domain);
    if (spec.accepts && spec.accepts.includes("isotropic") && !spec.description.includes("isotropic")) parts.push('or "isotropic"');
    if (spec.time && !spec.description.includes("ISO 8601")) parts.push("JD, or an ISO 8601 date");
    if (spec.default !== undefined) parts.push(`default ${defaultText(spec.default)}`);
    return parts.join("; ");
  }

  function inputRow(spec) {
    const name = spec.name;
    const required = spec.required && spec.default === undefined;
    const wide = spec.kind !== "quantity";
    const row = el("div", { class: "input-row" + (wide ? " wide" : ""), "data-input": name });
    const label = el("label", { class: "name", for: `in-${name}` }, breakable(name));
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
        "aria-describedby": described, placeholder: spec.default !== undefined ? defaultText(spec.default) : "" });
    } else {
      control = el("input", { id: `in-${name}`, class: "value", name, type: "text", inputmode: "decimal",
        autocomplete: "off", spellcheck: "false", "aria-describedby": described,
        placeholder: spec.time ? "JD or ISO date" : (spec.accepts ? "value or isotropic" :
          (spec.default !== undefined ? `default ${defaultText(spec.default)}` : "value")) });
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
    const domain = domainText(spec);
    row.append(el("p", { class: "desc", id: `desc-${name}` },
      [declared(state.calc, spec.description), document.createTextNode(`${unitNote}${domain ? " · " + domain : ""}`)]));
    row.append(el("p", { class: "field-error", id: `error-${name}`, hidden: true }));
    return row;
  }

  function buildForm(calc) {
    state.calc = calc;
    clear($("summary"));
    $("summary").append(math(calc.summary), " ",
      el("a", { id: "docs-link", href: `docs#${encodeURIComponent(calc.name)}`, text: "Formulas, units and references" }));
    const groups = [];
    for (const g of calc.exactly_one_of || []) groups.push("give exactly one of " + g.join(", "));
    for (const g of calc.at_most_one_of || []) groups.push("at most one of " + g.join(", "));
    $("groups").textContent = groups.length ? groups.join(" · ") : "";
    show($("groups"), groups.length > 0);
    const rows = $("input-rows");
    clear(rows);
    for (const spec of calc.inputs) rows.append(inputRow(spec));
    show($("time-format-row"), calc.inputs.some((i) => i.time));
    show($("observed"), hasCurve(calc));
    for (const k of ["rv1", "rv2"]) $(`obs-${k}`).value = "";
    resetCatalogue();
    $("correlations").value = "";
    // the example names two of this calculation's own measured inputs
    const measured = calc.inputs.filter((i) => i.kind === "quantity").map((i) => i.name);
    $("correlations").placeholder = measured.length > 1 ? `${measured[0]},${measured[1]}=0.3` : "";
    clearProblem();
    forgetResults();
    $("status").textContent = "Fill the inputs and press Compute.";
  }

  function selectCalculation(name, keepAddress) {
    const calc = state.byName[name] || state.calcs[0];
    $("calculation").value = calc.name;
    if (!keepAddress && location.hash !== "#" + calc.name) history.replaceState(null, "", "#" + calc.name);
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
    if ($("budget").checked) body.budget = true;
    const observed = {};
    if (hasCurve(calc)) {
      for (const key of ["rv1", "rv2"]) {
        const text = $(`obs-${key}`).value.trim();
        if (!text) continue;
        const parsed = parseObserved(text);
        if (typeof parsed === "string") local[`obs-${key}`] = [parsed];
        else observed[key] = parsed;
      }
    }
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
    return { body, local, observed };
  }

  // measured radial velocities typed by the visitor: "12.4 ± 0.6, -8.1 +- 0.5, 3.0" (one per time; a
  // value alone has no error bar; "-" or "nan" keeps a time without a measurement)
  function parseObserved(text) {
    const out = [];
    for (const part of text.split(/[,;\n]+/).map((p) => p.trim()).filter(Boolean)) {
      if (part === "-" || /^nan$/i.test(part)) { out.push(null); continue; }
      const m = part.match(new RegExp("^([+-]?" + UNUM + ")(?:\\s*(?:±|\\+-|\\+\\/-)\\s*(" + UNUM + "))?$"));
      if (!m) return `${part}: write a value, or value ± error (numbers in km/s)`;
      out.push({ value: Number(m[1]), error: m[2] !== undefined ? Number(m[2]) : 0 });
    }
    return out;
  }

  function hasCurve(calc) {
    return calc.outputs.some((o) => o.name === "rv1") && calc.inputs.some((i) => i.kind === "series" && i.time);
  }

  function clearProblem() {
    show($("problem"), false);
    clear($("problem"));
    for (const e of document.querySelectorAll(".field-error")) { e.textContent = ""; e.hidden = true; }
    for (const e of document.querySelectorAll("[aria-invalid]")) e.removeAttribute("aria-invalid");
  }

  // the kind of quantity each canonical unit measures, to say what fits when a unit is refused
  const UNIT_KINDS = {
    "d": "time", "km/s": "speed", "deg": "angle", "solMass": "mass", "au": "length", "mas": "angle",
    "pc": "length", "kpc": "length", "solRad": "length", "solMass/yr": "mass per time", "mJy": "spectral flux density",
    "GHz": "frequency", "K": "temperature", "s/yr": "time per time",
  };
  // only a unit the service could not read or convert: a message that merely says the word (a sigma or a unit
  // without a value, a date's number that takes no unit but days) gets no list of units
  const UNIT_REFUSED = /\bunit '|unknown unit|not a unit astropy can read|is a logarithmic unit/;
  function unitHint(spec, text) {
    if (!spec || !spec.unit || !UNIT_REFUSED.test(text)) return "";
    const kind = UNIT_KINDS[spec.unit];
    const fits = (UNIT_SUGGESTIONS[spec.unit] || [spec.unit]).join(", ");
    return ` Units that fit${kind ? ` (a ${kind})` : ""}: ${fits}, or any astropy unit convertible to ${spec.unit}.`;
  }

  // a correlation's error key ("0.between", "1.rho") as the visitor typed that pair ("period,k9=0.4"): the field
  // holds text, not a list they can count in
  function pairTyped(base, rest) {
    const m = base === "correlations" ? rest.match(/^(\d+)\.(between|rho)$/) : null;
    const pair = m && state.body && Array.isArray(state.body.correlations) ? state.body.correlations[Number(m[1])] : null;
    return pair && Array.isArray(pair.between) ? `${pair.between.join(",")}=${pair.rho}` : rest;
  }

  function ordinal(n) {
    return n + (n % 100 >= 11 && n % 100 <= 13 ? "th" : ({ 1: "st", 2: "nd", 3: "rd" }[n % 10] || "th"));
  }
  function showProblem(problem, target) {
    // the reason in the banner (the problem's detail and each field's message), and each message
    // again beside its field
    const errors = problem.errors || {};
    const calc = state.calc;
    const listed = [];
    let first = null;
    for (const [key, messages] of Object.entries(errors)) {
      const base = key.split(".")[0];
      const spec = calc ? calc.inputs.find((i) => i.name === base) : null;
      let text = [].concat(messages).map((m) => (typeof m === "string" ? m : JSON.stringify(m))).join("; ");
      // a list's entry counted from 1, as the visitor typed it (the answer's "entry 1" is its JSON index)
      if (spec && spec.kind === "series") text = text.replace(/(^|; )entry (\d+): /g, (_, sep, k) => `${sep}the ${ordinal(Number(k) + 1)} entry: `);
      text += unitHint(spec, text);
      const where = key === base ? "" : `${pairTyped(base, key.slice(base.length + 1))}: `;
      const box = $(`error-${base}`);
      let control = null;
      if (box && (spec || ["uncertainty", "correlations", "budget", "obs-rv1", "obs-rv2"].includes(base))) {
        box.textContent = (box.hidden || !box.textContent ? "" : box.textContent + " ") + where + text;
        box.hidden = false;
        control = spec ? $(`in-${base}`) : $({ uncertainty: "samples" }[base] || base);
        if (spec) for (const prefix of ["in", "sigma", "unit"]) {
          const c = $(`${prefix}-${base}`);
          if (c) c.setAttribute("aria-invalid", "true");
        } else if (control) control.setAttribute("aria-invalid", "true");
        first = first || control;
      }
      listed.push(base === "correlations" && where ? { key: base, text: where + text, control } : { key, text, control });
    }
    const box = target || $("problem");
    clear(box);
    const detail = problem.detail || "";
    box.append(el("strong", { text: problem.title || "Error" }), document.createTextNode(detail ? ": " + detail : ""));
    if (listed.length) {
      box.append(el("ul", {}, listed.map(({ key, text, control }) => {
        // the measured velocities' fields by their labels ("measured rv1"), not their element ids ("obs-rv1")
        const label = key.startsWith("obs-") ? `measured ${key.slice(4)}` : key;
        const name = control
          ? el("button", { type: "button", class: "link", text: label, title: `go to ${label}` })
          : el("code", { text: label });
        if (control) name.addEventListener("click", () => control.focus());
        return el("li", {}, [name, document.createTextNode(": " + text)]);
      })));
    }
    show(box, true);
    if (first && !target) first.focus({ preventScroll: false });
  }

  function forgetResults() {
    clear($("results"));
    clear($("plots"));
    show($("warnings"), false);
    show($("report-tools"), false);
    show($("downloads"), false);
    show($("link-status"), false);
    state.response = null;
  }

  async function compute(event) {
    if (event) event.preventDefault();
    clearProblem();
    const { body, local, observed } = collect();
    if (Object.keys(local).length) {
      showProblem({ title: "Invalid input", detail: "fix the marked fields", errors: local });
      forgetResults();        // the last answer is not this form's: leave none shown under the new inputs
      $("status").textContent = "Not sent: some fields need fixing.";
      return;
    }
    state.body = body;
    state.observed = observed;
    rememberInAddress();
    $("status").textContent = "Computing";
    $("status").classList.add("busy");
    $("compute").disabled = true;
    document.body.dataset.computed = "false";
    try {
      const r = await request("POST", state.calc.path, body);
      if (!r.ok) {
        const problem = typeof r.data === "object" ? r.data : { title: `HTTP ${r.status}`, detail: String(r.data) };
        showProblem(problem);
        forgetResults();
        $("status").textContent = `The service refused the request (${r.status}).`;
        return;
      }
      state.response = r.data;
      const drawn = r.data.uncertainty || {};
      if (drawn.method === "monte_carlo" && Number.isInteger(drawn.seed)) {
        // the report and the histograms ask again: with the seed drawn they show the numbers of this answer,
        // where a seed of their own drew others
        if (!(body.uncertainty && body.uncertainty.seed !== undefined)) body.uncertainty = { ...(body.uncertainty || {}), seed: drawn.seed };
        // the service switched to Monte Carlo (an isotropic inclination, samples): the form says what was done
        if ($("method-linear").checked) { $("method-mc").checked = true; toggleMethod(); }
      }
      rememberInAddress(drawn);
      renderResponse(state.calc, r.data);
      await drawPlots(state.calc, r.data, body, observed);
    } catch (err) {
      showProblem({ title: "No answer", detail: String(err) });
      $("status").textContent = "The service could not be reached.";
    } finally {
      $("status").classList.remove("busy");
      $("compute").disabled = false;
      document.body.dataset.computed = "true";
    }
  }

  // ------------------------------------------------------------------ results
  function isMeasured(x) {
    return x && typeof x === "object" && "value" in x && "unit" in x && !Array.isArray(x.value) && typeof x.value !== "object";
  }
  const finiteNumber = (x) => typeof x === "number" && isFinite(x);

  function valueCell(entry) {
    // a null sigma (heavy-tailed Monte Carlo draws): the median and its central 68.27 % interval
    const td = el("td", { class: "value", title: fullPrecision(entry) });
    if (entry.sigma === null && finiteNumber(entry.low) && finiteNumber(entry.high)) {
      // the median and the ends at the decimal place the shorter half-width gives by the PDG rule, as the
      // report prints them (4.5 (… 3.0 … 18.7), not 4.519 (… 2.981 … 18.69))
      const [v, low, high] = [entry.value, entry.low, entry.high];
      const halves = [v - low, high - v].filter((h) => h > 0);
      const place = halves.length ? pdgPlace(Math.min(...halves)) : null;
      const shift = exponentFor(Math.max(Math.abs(v), Math.abs(low), Math.abs(high)));
      const at = (x) => (place === null ? exact(x, 4) : atPlace(x, place, shift));
      const times = place !== null && shift ? ` × 10${superscript(shift)}` : "";
      td.append(document.createTextNode(at(v) + times + " "),
        el("span", { class: "interval", text: `(68.27 % interval ${at(low)} … ${at(high)}${times}; sigma undefined)` }));
      td.dataset.interval = "true";
    } else td.textContent = measured(entry);
    return td;
  }

  // a long output name may wrap after its underscores (a <wbr> adds no text)
  function breakable(name) { return name.split(/(?<=_)/).flatMap((part, i) => (i ? [el("wbr"), part] : [part])); }

  const BUDGET_ROUNDING = 1e-12;
  function budgetShare(share) {
    // one decimal, or two significant digits below 0.1 % (as the derivation report prints it)
    const pct = 100 * share;
    return `${pct !== 0 && Math.abs(pct) < 0.1 ? pct.toPrecision(2) : pct.toFixed(1)} %`;
  }

  function budgetTable(name, budget) {
    // the shares of the output's variance: inputs largest first, then each correlation term ("k1,k2",
    // which may be negative) on its own line; a zero (an input the output does not depend on, or a share within
    // the rounding of the doubles it is the difference of: report.BUDGET_ROUNDING) is left out; none: no table
    const finite = Object.entries(budget).filter(([, v]) => finiteNumber(v) && Math.abs(v) >= BUDGET_ROUNDING);
    if (!finite.length) return null;
    const terms = finite.filter(([t]) => !t.includes(",")).sort((a, b) => b[1] - a[1])
      .concat(finite.filter(([t]) => t.includes(",")));
    const rows = terms.map(([term, share]) => {
      const bar = el("span", { class: share < 0 ? "bar negative" : "bar" });
      bar.style.width = `${Math.min(100, Math.abs(100 * share)).toFixed(1)}%`;   // CSSOM: allowed by the CSP
      return el("tr", { "data-term": term }, [
        el("td", { text: term.includes(",") ? `${term.replace(",", " × ")} (correlation)` : term }),
        el("td", { class: "share", text: budgetShare(share) }),
        el("td", { class: "bar-cell", "aria-hidden": "true" }, bar),
      ]);
    });
    return el("table", { class: "budget", "data-budget": name }, [
      el("caption", { text: `share of the variance of ${name}` }), el("tbody", {}, rows)]);
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
    const columns = mc ? 5 : 4;
    for (const [name, entry] of Object.entries(results)) {
      if (!isMeasured(entry)) continue;
      const spec = outputs[name];
      const desc = el("td", { class: "desc" }, spec ? [declared(calc, spec.description)] : []);
      if (spec && spec.formula) desc.append(declared(calc, spec.formula, true, "formula"));
      const tr = el("tr", { "data-output": name }, [
        el("td", { class: "name" }, breakable(name)), valueCell(entry), el("td", { class: "unit", text: entry.unit || "" }), desc]);
      rows.push(tr);
      const extra = [];
      const budget = entry.budget && typeof entry.budget === "object" ? budgetTable(name, entry.budget) : null;
      if (budget) extra.push(budget);
      const holder = el("tr", { class: "extra", "data-extra": name, hidden: true }, el("td", { colspan: columns }, extra));
      if (mc) {
        const b = el("button", { type: "button", class: "histogram", text: "histogram", "aria-expanded": "false",
          title: `show the histogram of the Monte Carlo draws of ${name}` });
        b.addEventListener("click", () => toggleHistogram(name, b, holder));
        tr.append(el("td", { class: "hist" }, b));
      }
      show(holder, extra.length > 0);
      rows.push(holder);
    }
    if (rows.length) {
      const head = el("tr", {}, [["name", "result"], ["value", "value"], ["unit", "unit"], ["desc", "description"]]
        .concat(mc ? [["hist", ""]] : []).map(([cls, h]) => el("th", { class: cls, text: h })));
      out.append(el("table", { class: "results cards", id: "results-table" }, [el("thead", {}, head), el("tbody", {}, rows)]));
    }
    if (results.series) out.append(seriesTable(results.series, outputs, response.time_format === "mjd" ? "MJD" : "JD"));
    for (const [key, member] of Object.entries(results)) {
      if (key === "series" || isMeasured(member) || !member || typeof member !== "object") continue;
      out.append(eventLists(key, member));
    }
    const warnings = $("warnings");
    clear(warnings);
    for (const w of response.warnings || []) {
      warnings.append(el("li", { "data-code": w.code }, [el("code", { text: w.code }), document.createTextNode(" "),
        namedMath(w.message, w.fields)]));
    }
    show(warnings, (response.warnings || []).length > 0);
    show($("downloads"), true);
    show($("link-status"), false);
    show($("report-tools"), true);
    show($("report"), false);
    $("copy-report").disabled = true;
    show($("copy-status"), false);
  }

  async function toggleHistogram(name, button, holder) {
    // the service's SVG of the draws, shown in place under the output's row
    const shown = holder.querySelector("figure.histogram");
    if (shown) {
      shown.remove();
      button.setAttribute("aria-expanded", "false");
      button.textContent = "histogram";
      show(holder, holder.querySelector("td").childNodes.length > 0);
      return;
    }
    button.disabled = true;
    try {
      const r = await request("POST", state.calc.path, state.body, { format: "svg", plot: name });
      if (!r.ok) { showProblem(typeof r.data === "object" ? r.data : { title: "Error", detail: String(r.data) }); return; }
      const blob = r.data instanceof Blob ? r.data : new Blob([r.data], { type: "image/svg+xml" });
      const url = URL.createObjectURL(blob);
      const img = el("img", { src: url, alt: `histogram of the Monte Carlo draws of ${name}`, "data-plot": name });
      const save = el("button", { type: "button", text: "download (SVG)" });
      save.addEventListener("click", () => saveBlob(blob, `${state.calc.name}-${name}.svg`));
      holder.querySelector("td").append(el("figure", { class: "histogram", id: `histogram-${name}` }, [img,
        el("figcaption", {}, [document.createTextNode(`Monte Carlo draws of ${name}: the median and the central 68.27 % interval marked. `), save])]));
      show(holder, true);
      button.setAttribute("aria-expanded", "true");
      button.textContent = "hide";
    } finally {
      button.disabled = false;
    }
  }

  function saveBlob(blob, filename) {
    const url = URL.createObjectURL(blob);
    const a = el("a", { href: url, download: filename });
    document.body.append(a);
    a.click();
    a.remove();
    setTimeout(() => URL.revokeObjectURL(url), 10000);
  }

  // ------------------------------------------------------------------ downloads: the answer as JSON and CSV
  function csvCell(x) {
    if (x === null || x === undefined) return "";
    const t = String(x);
    return /[",\n\r]/.test(t) ? `"${t.replace(/"/g, '""')}"` : t;
  }
  function csvText(rows) { return rows.map((r) => r.map(csvCell).join(",")).join("\r\n") + "\r\n"; }

  function resultsCsv(response) {
    // one line per single-valued output (value, sigma, low, high, unit); a series follows as its own table
    const rows = [["output", "value", "sigma", "low", "high", "unit"]];
    const results = response.results || {};
    for (const [name, e] of Object.entries(results)) {
      if (isMeasured(e)) rows.push([name, e.value, e.sigma, e.low, e.high, e.unit]);
    }
    let text = csvText(rows);
    if (results.series) {
      const names = Object.keys(results.series).filter((k) => Array.isArray((results.series[k] || {}).value));
      const head = [], cols = [];
      for (const k of names) {
        const s = results.series[k];
        head.push(s.unit ? `${k}[${s.unit}]` : k); cols.push(s.value);
        for (const m of ["sigma", "low", "high"]) if (Array.isArray(s[m])) { head.push(`${k}_${m}`); cols.push(s[m]); }
      }
      const n = Math.max(0, ...cols.map((c) => c.length));
      const lines = [head];
      for (let i = 0; i < n; i++) lines.push(cols.map((c) => c[i]));
      text += "\r\n" + csvText(lines);
    }
    return text;
  }

  function downloadResults(kind) {
    if (!state.response) return;
    const name = state.calc.name;
    if (kind === "json") saveBlob(new Blob([JSON.stringify(state.response, null, 2) + "\n"], { type: "application/json" }), `${name}-results.json`);
    else saveBlob(new Blob([resultsCsv(state.response)], { type: "text/csv" }), `${name}-results.csv`);
  }

  // a date column's heading says its scale, "time [d, MJD]", as the report's does (report.series_header)
  const SERIES_DATES = ["times", "time"];
  function seriesTable(series, outputs, scale) {
    const names = Object.keys(series).filter((k) => series[k] && Array.isArray(series[k].value));
    const n = Math.max(0, ...names.map((k) => series[k].value.length));
    const described = names.filter((k) => outputs && outputs[k] && outputs[k].description);
    const unitOf = (k) => series[k].unit + (SERIES_DATES.includes(k) ? `, ${scale}` : "");
    const head = el("tr", {}, names.map((k) => el("th", { text: series[k].unit ? `${k} [${unitOf(k)}]` : k,
      title: described.includes(k) ? outputs[k].description : "" })));
    const body = [];
    for (let i = 0; i < n; i++) {
      body.push(el("tr", {}, names.map((k) => {
        const s = series[k];
        const entry = { value: s.value[i] };
        for (const m of ["sigma", "low", "high"]) if (Array.isArray(s[m])) entry[m] = s[m][i];
        return el("td", { title: fullPrecision(entry), text: measured(entry, k === "times" || k === "time" ? 12 : 6) });
      })));
    }
    // what each column is, as the results table says it beside each output: a column without a unit (a
    // separation in units of a, a phase) cannot be read from its header alone
    const notes = el("ul", { class: "series-notes", id: "series-notes" }, described.map((k) =>
      el("li", { "data-column": k }, [el("code", { text: k }), document.createTextNode(": "), math(outputs[k].description)])));
    return el("div", { class: "series-box" }, [
      el("h3", { text: "Series" }),
      el("div", { class: "scroll" }, [
        el("table", { class: "results series", id: "series-table" }, [el("thead", {}, head), el("tbody", {}, body)])]),
      notes,
    ]);
  }

  // An event's calendar date to the resolution its sigma supports: the day for a sigma of a day or more, the
  // minute for one of a minute or more (the date itself is rounded by the PDG rule beside it); the full
  // string stays in the cell's title.
  function isoShown(iso, e, unit) {
    const sigma = typeof e.sigma === "number" ? e.sigma
      : typeof e.low === "number" && typeof e.high === "number" ? (e.high - e.low) / 2 : null;
    const t = typeof iso === "string" && /^\d{4}-/.test(iso) ? Date.parse(/[zZ]|[+-]\d\d:\d\d$/.test(iso) ? iso : iso + "Z") : NaN;
    if (unit !== "d" || !(sigma >= 1 / 1440) || isNaN(t)) return iso;
    const [step, length] = sigma >= 1 ? [86400000, 10] : [60000, 16];
    return new Date(Math.round(t / step) * step).toISOString().slice(0, length);
  }

  function eventLists(key, member) {
    const box = el("div", { class: "events", "data-member": key });
    // dates given back in the caller's format say which, as the report's event tables do (report.event_lists)
    const unit = member.unit || "";
    const dateUnit = unit + (unit && member.time_format ? `, ${member.time_format === "mjd" ? "MJD" : "JD"}` : "");
    for (const [sub, entries] of Object.entries(member)) {
      if (!Array.isArray(entries) || !entries.length || typeof entries[0] !== "object") continue;
      // a member's sigma (NAME_sigma, as an SB2's velocity_separation has) is printed with it, not apart
      const keys = Object.keys(entries[0]).filter((k) => !["value", "sigma", "low", "high"].includes(k)
        && !(k.endsWith("_sigma") && k.slice(0, -6) in entries[0]));
      const fieldUnits = member.units || {};      // e.g. km/s for an event's velocity_separation
      const head = el("tr", {}, [el("th", { text: dateUnit ? `date [${dateUnit}]` : "date" })].concat(
        keys.map((k) => el("th", { text: fieldUnits[k] ? `${k} [${fieldUnits[k]}]` : k }))));
      const rows = entries.map((e) => el("tr", {}, [el("td", { class: "value", title: fullPrecision(e), text: measured(e, 12) })]
        .concat(keys.map((k) => k === "iso" && e[k]
          ? el("td", { "data-field": k, title: e[k], text: isoShown(e[k], e, unit) })
          : el("td", { "data-field": k, text: (k + "_sigma") in e ? measured({ value: e[k], sigma: e[k + "_sigma"] }, 6)
            : typeof e[k] === "number" ? exact(e[k], 6) : String(e[k] ?? "") })))));
      box.append(el("h3", { text: `${key}: ${sub.replace(/_/g, " ")}` }),
        el("table", { class: "results" }, [el("thead", {}, head), el("tbody", {}, rows)]));
    }
    // what the events say of themselves (the light-travel time applied, both amplitudes with their sigmas), a line
    // each, as the report's notes on the events (report.event_notes)
    const fieldUnits = member.units || {};
    for (const [sub, values] of Object.entries(member)) {
      if (sub === "units" || !values || typeof values !== "object" || Array.isArray(values)) continue;
      const vals = Object.values(values);
      if (!vals.length || !vals.every((v) => v === null || typeof v === "string" || typeof v === "number")) continue;
      const parts = Object.keys(values).filter((k) => !(k.endsWith("_sigma") && k.slice(0, -6) in values)).map((k) => {
        const v = values[k];
        const shown = (k + "_sigma") in values ? measured({ value: v, sigma: values[k + "_sigma"] }, 6)
          : typeof v === "number" ? exact(v, 6) : String(v ?? "");
        return `${k} = ${shown}${fieldUnits[k] ? " " + fieldUnits[k] : ""}`;
      });
      box.append(el("p", { class: "event-notes", "data-notes": sub, text: `${key}: ${sub.replace(/_/g, " ")}: ${parts.join(", ")}` }));
    }
    return box;
  }

  // ------------------------------------------------------------------ plots (SVG drawn here, from the series)
  function value(inputs, name) {
    const e = inputs[name];
    return e && typeof e.value === "number" && isFinite(e.value) ? e.value : null;
  }

  // The dense curves: one cycle evenly spaced in eccentric anomaly (a quick periastron passage is as
  // well sampled as the slow apastron) for the phase plot, and the span of the requested times for the
  // date plot (while it covers few enough cycles for a curve to be readable).
  const MAX_CYCLES_BY_DATE = 12;
  function denseGrids(times, period, t0, ecc) {
    const lo = Math.min(...times), hi = Math.max(...times);
    if (!(period > 0)) {
      const pad = Math.max(hi - lo, 1) * 0.05;
      return { phase: [], date: linspace(lo - pad, hi + pad, 800) };
    }
    t0 = t0 === null ? lo : t0;
    const e = Math.min(Math.max(ecc || 0, 0), 0.999);
    const atE = (cycle, E) => t0 + period * (cycle + (E - e * Math.sin(E)) / (2 * Math.PI));
    const phase = linspace(0, 2 * Math.PI, 361).map((E) => atE(0, E));
    let a = lo, b = hi;
    if (b - a < period) { const mid = (a + b) / 2; a = mid - period / 2; b = mid + period / 2; }
    else { const pad = 0.03 * (b - a); a -= pad; b += pad; }
    if ((b - a) / period > MAX_CYCLES_BY_DATE) return { phase, date: [] };
    const date = [];
    for (let c = Math.floor((a - t0) / period); c <= Math.ceil((b - t0) / period); c++) {
      for (const E of linspace(0, 2 * Math.PI, 360, false)) { const t = atE(c, E); if (t >= a && t <= b) date.push(t); }
    }
    for (const t of linspace(a, b, 200)) date.push(t);
    date.sort((x, y) => x - y);
    return { phase, date };
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
      else if (e.value === "isotropic") { b[spec.name] = "isotropic"; b.uncertainty = { method: "monte_carlo", samples: 100, seed: 1 }; }
      else if (spec.kind === "quantity") b[spec.name] = e.value;
    }
    if (requestBody.units) b.units = requestBody.units;
    if (response.time_format) b.time_format = response.time_format;   // the echoed times are in it
    return b;
  }

  function pick(series, indices) {
    const out = {};
    for (const [k, s] of Object.entries(series)) if (s && Array.isArray(s.value)) out[k] = { unit: s.unit, value: indices.map((i) => s.value[i]) };
    return out;
  }

  async function drawPlots(calc, response, body, observed) {
    const box = $("plots");
    clear(box);
    // figures drawn at the width they are shown at (text stays readable on a phone), 300-640 units
    const W = Math.round(Math.min(640, Math.max(300, box.clientWidth || 640)));
    const H = Math.max(240, Math.round(W * 0.53));
    const series = (response.results || {}).series;
    const timeInput = calc.inputs.find((i) => i.kind === "series" && i.time);
    if (!series || !timeInput || !series.rv1) return;
    // a series input's values come back under its label (e.g. "time" for the input "times")
    const key = [timeInput.label, timeInput.name, "time"].find((k) => k && series[k]);
    if (!key) return;
    const times = series[key].value;
    const inputs = response.inputs || {};
    const period = value(inputs, "period");
    const grids = denseGrids(times, period, value(inputs, "t_periastron"), value(inputs, "eccentricity"));
    const r = await request("POST", calc.path, nominalBody(calc, response, grids.phase.concat(grids.date), body));
    if (!r.ok || !r.data.results || !r.data.results.series) return;
    const all = r.data.results.series;
    const nPhase = grids.phase.length;
    const byPhase = pick(all, grids.phase.map((_, i) => i));
    const byDate = pick(all, grids.date.map((_, i) => nPhase + i));
    const rvUnit = series.rv1.unit || "";
    const gamma = value(inputs, "gamma");
    const hlines = gamma !== null && !inputs.gamma.default && (inputs.gamma.unit || rvUnit) === rvUnit ? [{ y: gamma, cls: "gamma", label: "systemic velocity" }] : [];
    // the visitor's measured velocities at the requested times, and their residuals from the model there
    const measuredRv = {}, residuals = {};
    for (const k of ["rv1", "rv2"]) {
      if (!observed || !observed[k] || !series[k]) continue;
      measuredRv[k] = observed[k];
      residuals[k] = times.map((_, i) => (observed[k][i] && finiteNumber(series[k].value[i]) ? observed[k][i].value - series[k].value[i] : null));
    }
    const layers = (x, xPoints, dense) => {
      const lines = [], points = [];
      ["rv1", "rv2"].forEach((k, n) => {
        if (!series[k]) return;
        const cls = `star${n + 1}`;
        if (dense[k]) lines.push({ x, y: dense[k].value, cls, label: `star ${n + 1} (${k})` });
        if (measuredRv[k]) {
          points.push({ x: xPoints, y: measuredRv[k].map((m) => (m ? m.value : null)), err: measuredRv[k].map((m) => (m ? [m.error, m.error] : null)),
            cls: `${cls} measured`, label: `measured (${k})` });
        } else points.push({ x: xPoints, y: series[k].value, err: errorsOf(series[k]), cls, label: `at the times (${k})` });
      });
      return { lines, points };
    };
    const caption = Object.keys(measuredRv).length
      ? `${calc.title}: radial velocities (positive receding), curves from the nominal elements; points are the measured velocities with their errors.`
      : `${calc.title}: radial velocities (positive receding), curves from the nominal elements; points at the requested times with their 1σ errors.`;
    const phaseOf = (t) => (period > 0 ? (((t - (value(inputs, "t_periastron") ?? Math.min(...times))) / period) % 1 + 1) % 1 : null);
    if (nPhase && byPhase.phase) {
      const order = byPhase.phase.value.map((p, i) => [p, i]).sort((a, b) => a[0] - b[0]).map((x) => x[1]);
      const sorted = pick(byPhase, order);
      const xPoints = series.phase ? series.phase.value : times.map(phaseOf);
      const { lines, points } = layers(sorted.phase.value, xPoints, sorted);
      const fig = chart({ width: W, height: H, xlabel: "orbital phase since periastron", ylabel: `radial velocity [${rvUnit}]`,
        lines, points, hlines, xlim: [0, 1], title: "radial velocities by phase", id: "rv-phase-plot" });
      box.append(plotFigure(fig, "wide", caption));
      if (Object.keys(residuals).length) box.append(residualFigure("rv-residuals-phase", W, xPoints, residuals, rvUnit, "orbital phase since periastron", [0, 1]));
    }
    if (grids.date.length && byDate[key]) {
      const offset = Math.min(...grids.date) > 1e5 ? Math.floor(Math.min(...grids.date) / 1e4) * 1e4 : 0;
      const x = byDate[key].value.map((t) => t - offset);
      const xPoints = times.map((t) => t - offset);
      const xlabel = offset ? `JD − ${offset} [d]` : "JD [d]";
      const { lines, points } = layers(x, xPoints, byDate);
      const fig = chart({ width: W, height: H, xlabel, ylabel: `radial velocity [${rvUnit}]`, lines, points, hlines,
        title: "radial velocities by date", id: "rv-plot" });
      box.append(plotFigure(fig, "wide", caption));
      if (Object.keys(residuals).length) box.append(residualFigure("rv-residuals", W, xPoints, residuals, rvUnit, xlabel, null));
    } else if (period > 0) {
      box.append(el("p", { class: "hint", text: `The times span more than ${MAX_CYCLES_BY_DATE} periods: the curve is drawn by phase only.` }));
    }
    const dense = byDate.projected_separation ? byDate : byPhase;
    if (dense.position_angle && dense.projected_separation && series.position_angle && series.projected_separation) {
      const sky = (s) => s.projected_separation.value.map((rho, i) => {
        const pa = (s.position_angle.value[i] * Math.PI) / 180;
        return [rho * Math.sin(pa), rho * Math.cos(pa)];
      });
      const d = sky(byPhase.projected_separation ? byPhase : dense), p = sky(series);
      const unit = dense.projected_separation.unit || "";
      const fig2 = chart({ width: Math.min(W, 360), height: Math.min(W, 360), xlabel: `east offset [${unit}]`, ylabel: `north offset [${unit}]`,
        lines: [{ x: d.map((q) => q[0]), y: d.map((q) => q[1]), cls: "sky", label: "star 2 about star 1" }],
        points: [{ x: p.map((q) => q[0]), y: p.map((q) => q[1]), cls: "sky", label: "requested" }],
        marks: periastronMark(byPhase.projected_separation ? byPhase : dense, d),
        origin: true, invertX: true, equal: true, title: "relative orbit (north up, east left)", id: "orbit-plot" });
      box.append(plotFigure(fig2, "square", "Star 2 relative to star 1 on the sky; the square marks periastron."));
    }
  }

  function residualFigure(id, W, x, residuals, unit, xlabel, xlim) {
    const points = Object.entries(residuals).map(([k, y]) => ({ x, y, cls: k === "rv1" ? "star1 measured" : "star2 measured", label: `measured − model (${k})`,
      err: (state.observed[k] || []).map((m) => (m ? [m.error, m.error] : null)) }));
    const fig = chart({ width: W, height: 190, xlabel, ylabel: `O − C [${unit}]`, lines: [], points, xlim,
      hlines: [{ y: 0, cls: "gamma", label: "model" }], title: "residuals", id });
    return plotFigure(fig, "residuals", "");
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
    const W = o.width, m = { l: 62, r: 14, t: 26, b: 44 };
    // the legend sits in rows above the plotting area, so that it never hides a point or a curve
    const entries = o.lines.map((l) => ({ cls: l.cls, label: l.label, kind: "line" }))
      .concat(o.points.map((p) => ({ cls: p.cls, label: p.label, kind: "point" })))
      .concat((o.hlines || []).map((h) => ({ cls: h.cls, label: h.label, kind: "hline" })));
    let lx = 0, rows = entries.length ? 1 : 0;
    for (const e of entries) {
      const width = 30 + e.label.length * 6.1;
      if (lx > 0 && lx + width > W - m.l - m.r) { rows += 1; lx = 0; }
      e.row = rows - 1; e.dx = lx; lx += width;
    }
    m.t = 26 + rows * 15;
    const H = o.height + rows * 15;
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
        g.append(svgEl("circle", { class: `point ${p.cls}`, cx: X(x), cy: Y(y), r: 4, "data-x": x, "data-y": y }));
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
    entries.forEach((e) => {
      const y = 26 + e.row * 15 + 6, x = m.l + e.dx;
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

  // A drawn figure saved as a file of its own: the SVG as shown, its style-sheet colours and strokes
  // written onto each element as presentation attributes (no style sheet or style attribute needed).
  const SVG_PROPERTIES = ["fill", "fill-opacity", "stroke", "stroke-width", "stroke-dasharray", "opacity",
    "font-family", "font-size", "font-weight"];
  function standaloneSvg(svg) {
    const copy = svg.cloneNode(true);
    const from = [svg, ...svg.querySelectorAll("*")], to = [copy, ...copy.querySelectorAll("*")];
    from.forEach((node, i) => {
      const cs = getComputedStyle(node);
      for (const p of SVG_PROPERTIES) { const v = cs.getPropertyValue(p); if (v) to[i].setAttribute(p, v); }
      to[i].removeAttribute("class");
    });
    const [, , w, h] = svg.getAttribute("viewBox").split(" ");
    copy.setAttribute("xmlns", SVGNS);
    copy.setAttribute("width", w);
    copy.setAttribute("height", h);
    copy.removeAttribute("id");
    return '<?xml version="1.0" encoding="utf-8"?>\n' + new XMLSerializer().serializeToString(copy) + "\n";
  }
  function plotFigure(svg, cls, caption) {
    const save = el("button", { type: "button", class: "save-figure", text: "save (SVG)", title: "save this figure as an SVG file" });
    save.addEventListener("click", () => saveBlob(new Blob([standaloneSvg(svg)], { type: "image/svg+xml" }),
      `${state.calc.name}-${svg.id}.svg`));
    return el("figure", { class: cls }, [svg, el("figcaption", {}, [document.createTextNode(caption ? caption + " " : ""), save])]);
  }

  // ------------------------------------------------------------------ a catalogue from a file
  // A CSV (header NAME or NAME[unit]) or ECSV file (units from its YAML header) is read here only for its
  // preview; the file's text itself goes to POST v1/batch/<name>, whose answer table is shown and saved as it came.
  const PREVIEW_ROWS = 10;
  const SHOWN_ROWS = 500;

  function splitLine(line, delimiter) {
    // one line of delimited text; double quotes group (and "" is a quote); a space delimiter is any run of blanks
    const cells = [];
    let cell = "", quoted = false, had = false, i = 0;
    const push = () => { cells.push(had ? cell : cell.trim() === "" ? null : cell.trim()); cell = ""; had = false; };
    while (i < line.length) {
      const c = line[i];
      if (quoted) {
        if (c === '"' && line[i + 1] === '"') { cell += '"'; i += 2; continue; }
        if (c === '"') { quoted = false; i++; continue; }
        cell += c; i++; continue;
      }
      if (c === '"') { quoted = true; had = true; i++; continue; }
      if (delimiter === " " ? /\s/.test(c) : c === delimiter) {
        if (delimiter === " ") { if (cell !== "" || had) push(); while (/\s/.test(line[i] || "x")) i++; continue; }
        push(); i++; continue;
      }
      cell += c; i++;
    }
    if (delimiter !== " " || cell !== "" || had) push();
    return cells.map((x) => (x === "" ? null : x));
  }

  function ecsvHeader(lines) {
    // the units (and the delimiter) from an ECSV header's "datatype" list, in flow or block style
    const yaml = lines.map((l) => l.replace(/^#\s?/, ""));
    const units = {};
    let delimiter = " ", current = null, inTypes = false;
    const unquote = (v) => v.trim().replace(/^['"](.*)['"]$/, "$1");
    for (const line of yaml) {
      const d = line.match(/^delimiter:\s*(.+)$/);
      if (d) { delimiter = unquote(d[1]) || " "; continue; }
      if (/^datatype:\s*$/.test(line)) { inTypes = true; continue; }
      if (inTypes && /^\S/.test(line) && !line.startsWith("-")) inTypes = false;
      if (!inTypes) continue;
      const flow = line.match(/^\s*-\s*\{(.*)\}\s*$/);
      if (flow) {
        const entry = {};
        for (const part of flow[1].split(/,(?![^{]*\})/)) {
          const kv = part.match(/^\s*([\w]+)\s*:\s*(.*)$/);
          if (kv) entry[kv[1]] = unquote(kv[2]);
        }
        if (entry.name && entry.unit !== undefined) units[entry.name] = entry.unit;
        current = null;
        continue;
      }
      const item = line.match(/^\s*-\s*([\w]+)\s*:\s*(.*)$/);
      const more = line.match(/^\s+([\w]+)\s*:\s*(.*)$/);
      if (item) { current = {}; current[item[1]] = unquote(item[2]); }
      else if (more && current) current[more[1]] = unquote(more[2]);
      if (current && current.name && current.unit !== undefined) units[current.name] = current.unit;
    }
    return { units, delimiter };
  }

  function parseTable(text) {
    const lines = text.replace(/^\uFEFF/, "").split(/\r?\n/);
    const ecsv = /^#\s*%ECSV/.test(lines[0] || "");
    const comments = lines.filter((l) => l.startsWith("#"));
    const body = lines.filter((l) => !l.startsWith("#") && l.trim() !== "");
    if (!body.length) return { error: "the file has no header line" };
    let units = {}, delimiter = ",";
    if (ecsv) ({ units, delimiter } = ecsvHeader(comments));
    const header = splitLine(body[0], delimiter).map((h) => h || "");
    const columns = header.map((h) => {
      const m = h.match(/^\s*([^[\]]+?)\s*\[\s*([^\]]*?)\s*\]\s*$/);
      const name = m ? m[1] : h.trim();
      return { label: h, name, unit: m ? m[2] : units[name] };
    });
    const rows = body.slice(1).map((l) => splitLine(l, delimiter));
    const bad = rows.findIndex((r) => r.length !== columns.length);
    if (bad >= 0) return { error: `line ${bad + 2} of the table has ${rows[bad].length} cells for ${columns.length} columns` };
    return { ecsv, columns, rows, delimiter };
  }

  function rawCells(line, delimiter) {
    // one line cut into its cells as written (quotes kept), to drop whole columns without rewriting any cell
    const cells = [];
    let start = 0, quoted = false;
    for (let i = 0; i < line.length; i++) {
      const c = line[i];
      if (c === '"') quoted = !quoted;
      else if (!quoted && (delimiter === " " ? /\s/.test(c) : c === delimiter)) {
        cells.push(line.slice(start, i));
        if (delimiter === " ") while (/\s/.test(line[i + 1] || "x")) i++;
        start = i + 1;
      }
    }
    cells.push(line.slice(start));
    return cells;
  }

  function withoutColumns(text, table, dropped) {
    // the file's own text less the columns the service would refuse (see answerColumn):
    // their cells, and in an ECSV header their datatype entries (astropy's one-line form)
    if (!dropped.size) return text;
    const delimiter = table.delimiter;
    const keep = table.columns.map((c) => !dropped.has(c.name));
    return text.replace(/^\uFEFF/, "").split(/\r?\n/).filter((line) => {
      const m = line.match(/^#\s*-\s*\{\s*name:\s*['"]?([^,'"}]+?)['"]?\s*,/);
      return !(m && dropped.has(m[1]));
    }).map((line) => {
      if (line.startsWith("#") || line.trim() === "") return line;
      const cells = rawCells(delimiter === " " ? line.trim() : line, delimiter);
      return cells.filter((_, k) => keep[k]).join(delimiter);
    }).join("\n");
  }

  function catalogueOptions() {
    // the options of the whole batch, from the form: the query parameter "options" (a JSON object)
    const { body } = collect();
    const options = {};
    for (const k of ["uncertainty", "correlations", "time_format"]) if (body[k]) options[k] = body[k];
    return options;
  }

  function resetCatalogue(keepFile) {
    state.catalogue = null;
    clear($("catalogue-preview"));
    clear($("catalogue-results"));
    show($("catalogue-problem"), false);
    $("catalogue-compute").disabled = true;
    $("catalogue-download").disabled = true;
    if (!keepFile) $("catalogue-file").value = "";
    // a calculation over a list (an ephemeris' times, a forecast's shells) answers a series per system,
    // which no CSV or ECSV cell can hold (the service's 406): said before a file is chosen, not after
    const lists = state.calc ? state.calc.inputs.filter((i) => i.kind === "series").map((i) => i.name) : [];
    $("catalogue-file").disabled = lists.length > 0;
    $("catalogue-status").textContent = !state.calc ? "" : lists.length
      ? `${state.calc.name} answers a series for each system (over its ${lists.join(", ")}), which a CSV or ECSV ` +
        `table cannot hold: send its catalogue to POST v1/batch/${state.calc.name} as JSON or Apache Arrow ` +
        "(the Python client's batch does), or compute one system at a time above."
      : `Columns the file may have for ${state.calc.name}: ${state.calc.inputs.map((i) => i.name).join(", ")} (and their sigma columns).`;
  }

  function systems(n) { return `${n} system${n === 1 ? "" : "s"}`; }
  function unitLabel(unit) { return unit === undefined ? "" : ` [${unit || "dimensionless"}]`; }

  function inputColumn(inputs, name) {
    const stem = name.replace(/_sigma(_minus|_plus)?$/, "");
    return inputs[stem] ? stem : null;
  }

  function answerColumn(name) {
    // a column named like one of the answer's, which the service will not carry along (keep): the
    // rule of calcservice.columns.kept_name_errors; a name with a comma cannot be listed in keep
    return name.includes(",") || ["error_status", "error", "warnings"].includes(name) || name.startsWith("uncertainty_") ||
      state.calc.outputs.some((o) => name === o.name || (name.startsWith(o.name + "_") &&
        ["sigma", "low", "high", "budget"].includes(name.slice(o.name.length + 1).split("_")[0])));
  }

  async function readCatalogue(file) {
    resetCatalogue(true);
    if ($("catalogue-file").disabled) return;          // a file dropped where no table can carry the answer
    const text = await file.text();
    const table = parseTable(text);
    if (table.error) {
      showProblem({ title: "Cannot read the file", detail: `${file.name}: ${table.error}` }, $("catalogue-problem"));
      return;
    }
    const inputs = Object.fromEntries(state.calc.inputs.map((i) => [i.name, i]));
    // the file's own columns (a name, a catalogue number) travel with it and come back beside the results
    const own = table.columns.map((c) => c.name).filter((n) => !inputColumn(inputs, n));
    const kept = own.filter((n) => !answerColumn(n)), dropped = own.filter(answerColumn);
    state.catalogue = { file: file.name, table, kept, text: withoutColumns(text, table, new Set(dropped)) };
    const head = el("tr", {}, [el("th", { text: "#" })].concat(table.columns.map((c) => {
      const stem = inputColumn(inputs, c.name);
      // a sigma column without a unit of its own is read in its value column's unit (NAME[yr] -> NAME_sigma in yr)
      const valueColumn = stem && stem !== c.name ? table.columns.find((v) => v.name === stem) : undefined;
      let unit, note = "";
      if (c.unit !== undefined) unit = c.unit;
      else if (valueColumn && valueColumn.unit !== undefined) [unit, note] = [valueColumn.unit, ` (as ${stem})`];
      else if (stem) [unit, note] = [inputs[stem].unit, " (default)"];
      return el("th", { "data-column": c.name }, [document.createTextNode(c.name),
        el("span", { class: "unit", text: unitLabel(unit) + note })]);
    })));
    const rows = table.rows.slice(0, PREVIEW_ROWS).map((r, i) => el("tr", {}, [el("td", { text: String(i + 1) })]
      .concat(r.map((x) => el("td", { text: x === null ? "—" : x })))));
    $("catalogue-preview").append(el("h3", { text: `${file.name}: the first ${Math.min(PREVIEW_ROWS, table.rows.length)} of ${table.rows.length} rows, as read` }),
      el("table", { class: "catalogue", id: "catalogue-preview-table" }, [el("thead", {}, head), el("tbody", {}, rows)]));
    const notes = [`${systems(table.rows.length)}, ${table.ecsv ? "ECSV (units from its header)" : "CSV"}.`];
    if (kept.length) notes.push(`Columns of your own, carried into the results: ${kept.join(", ")}.`);
    if (dropped.length) notes.push(`Columns named like columns of the results, left out: ${dropped.join(", ")}.`);
    $("catalogue-status").textContent = notes.join(" ");
    $("catalogue-compute").disabled = table.rows.length === 0;
  }

  async function computeCatalogue() {
    // the file itself to the batch endpoint (CSV in, CSV out; ECSV in, ECSV out), its answer shown and saved as sent
    const cat = state.catalogue;
    if (!cat) return;
    show($("catalogue-problem"), false);
    clear($("catalogue-results"));
    $("catalogue-compute").disabled = true;
    $("catalogue-download").disabled = true;
    $("catalogue-status").textContent = `Computing ${systems(cat.table.rows.length)}…`;
    try {
      const options = catalogueOptions();
      const params = [];
      if (Object.keys(options).length) params.push(`options=${encodeURIComponent(JSON.stringify(options))}`);
      if (cat.kept.length) params.push(`keep=${encodeURIComponent(cat.kept.join(","))}`);
      const query = params.length ? `?${params.join("&")}` : "";
      const r = await fetch(`v1/batch/${state.calc.name}${query}`, {
        method: "POST", headers: { "Content-Type": "text/csv", Accept: "text/csv" }, body: cat.text });
      const ctype = r.headers.get("Content-Type") || "";
      const text = await r.text();
      if (!r.ok) {
        let problem = { title: `HTTP ${r.status}`, detail: text };
        if (ctype.includes("json")) try { problem = JSON.parse(text); } catch (e) { /* the text as it came */ }
        showProblem(problem, $("catalogue-problem"));
        $("catalogue-status").textContent = `The service refused the table (${r.status}).`;
        return;
      }
      const answer = parseTable(text);
      if (answer.error) throw new Error(`the answer table: ${answer.error}`);
      cat.answer = { text, table: answer, options };
      renderCatalogue(cat);
    } catch (err) {
      showProblem({ title: "No answer", detail: String(err) }, $("catalogue-problem"));
    } finally {
      $("catalogue-compute").disabled = false;
    }
  }

  function renderCatalogue(cat) {
    // the answer table's columns: the kept ones (the file's own), NAME, NAME_sigma (Monte Carlo: NAME_low, NAME_high), error_status, error, warnings
    const { table } = cat.answer;
    const index = Object.fromEntries(table.columns.map((c, k) => [c.name, k]));
    const kept = new Set(cat.kept);
    const names = table.columns.map((c) => c.name).filter((n) => !kept.has(n) && !/_(sigma|low|high)$/.test(n) && !["error_status", "error", "warnings"].includes(n));
    const cell = (row, name) => (index[name] === undefined ? null : row[index[name]]);
    const number = (x) => (x === null || x === undefined || !NUMBER.test(x) ? null : Number(x));
    const head = el("tr", {}, [el("th", { text: "#" })].concat(cat.kept.map((k) => el("th", { text: k })), [el("th", { text: "error" })], names.map((k) => el("th", {}, [document.createTextNode(k),
      el("span", { class: "unit", text: unitLabel(table.columns[index[k]].unit) })])), [el("th", { text: "warnings" })]));
    const rows = [];
    let failed = 0;
    table.rows.forEach((row, i) => {
      const error = cell(row, "error"), status = cell(row, "error_status");
      if (error || status) failed++;
      if (i >= SHOWN_ROWS) return;
      const cells = [el("td", { text: String(i + 1) })].concat(cat.kept.map((k) => el("td", { class: "kept", text: cell(row, k) ?? "" })),
        [el("td", { class: "row-error", text: error || status ? `${status || ""}: ${error || ""}` : "" })]);
      for (const k of names) {
        const entry = { value: number(cell(row, k)) };
        for (const m of ["sigma", "low", "high"]) if (index[`${k}_${m}`] !== undefined) entry[m] = number(cell(row, `${k}_${m}`));
        cells.push(el("td", { title: entry.value === null ? "" : fullPrecision(entry), text: entry.value === null ? "" : measured(entry) }));
      }
      cells.push(el("td", { text: (cell(row, "warnings") || "").split(";").filter(Boolean).join("; ") }));
      rows.push(el("tr", { class: error || status ? "failed" : "", "data-row": i }, cells));
    });
    const count = table.rows.length;
    $("catalogue-results").append(el("h3", { text: `Results: ${count - failed} of ${systems(count)} answered` + (failed ? `, ${failed} refused (their reasons in the error column)` : "") }),
      el("table", { class: "catalogue", id: "catalogue-results-table" }, [el("thead", {}, head), el("tbody", {}, rows)]));
    if (count > SHOWN_ROWS) $("catalogue-results").append(el("p", { class: "hint", text: `The first ${SHOWN_ROWS} rows are shown; the download has them all.` }));
    const unc = cat.answer.options.uncertainty || {};
    $("catalogue-status").textContent = `${cat.file}: ${systems(count)}, ${unc.method === "monte_carlo" ? `Monte Carlo (${unc.samples || "default"} draws${unc.seed !== undefined ? `, seed ${unc.seed}` : ""})` : "linear propagation"}.`;
    $("catalogue-download").disabled = false;
    $("catalogue-download").textContent = `Download the results (${cat.table.ecsv ? "ECSV" : "CSV"})`;
  }

  function wireCatalogue() {
    const zone = $("dropzone");
    $("catalogue-file").addEventListener("change", (e) => { if (e.target.files[0]) readCatalogue(e.target.files[0]); });
    zone.addEventListener("dragover", (e) => { e.preventDefault(); zone.classList.add("over"); });
    zone.addEventListener("dragleave", () => zone.classList.remove("over"));
    zone.addEventListener("drop", (e) => {
      e.preventDefault();
      zone.classList.remove("over");
      if (e.dataTransfer.files[0]) readCatalogue(e.dataTransfer.files[0]);
    });
    $("catalogue-compute").addEventListener("click", computeCatalogue);
    $("catalogue-download").addEventListener("click", () => {
      const cat = state.catalogue;
      if (cat && cat.answer) {
        const suffix = cat.table.ecsv ? "ecsv" : "csv";
        saveBlob(new Blob([cat.answer.text], { type: "text/csv" }), `${state.calc.name}-${cat.file.replace(/\.\w+$/, "")}-results.${suffix}`);
      }
    });
  }

  // ------------------------------------------------------------------ the computation in the address
  // "#sb2?period=41.6&period.sigma=0.02&period.unit=d&uncertainty=monte_carlo&samples=400&seed=3": the
  // fields as typed (a link reproduces the form and, opened, computes it again)
  // `drawn`: the uncertainty of the answer shown; Monte Carlo draws with a seed the service picked (none given, or
  // the method switched for an isotropic inclination) put that seed in the link, which then gives the same numbers
  function formState(drawn) {
    const q = new URLSearchParams();
    for (const spec of state.calc.inputs) {
      const v = $(`in-${spec.name}`).value.trim();
      if (v) q.set(spec.name, v);
      for (const part of ["sigma", "unit"]) {
        const c = $(`${part}-${spec.name}`);
        if (c && c.value.trim()) q.set(`${spec.name}.${part}`, c.value.trim());
      }
    }
    if ($("method-mc").checked) {
      q.set("uncertainty", "monte_carlo");
      if ($("samples").value.trim()) q.set("samples", $("samples").value.trim());
      if ($("seed").value.trim()) q.set("seed", $("seed").value.trim());
    }
    if (drawn && drawn.method === "monte_carlo" && Number.isInteger(drawn.seed) && !q.has("seed")) {
      q.set("uncertainty", "monte_carlo");
      if (!q.has("samples") && Number.isInteger(drawn.samples)) q.set("samples", String(drawn.samples));
      q.set("seed", String(drawn.seed));
    }
    if ($("correlations").value.trim()) q.set("correlations", $("correlations").value.trim());
    if (!$("time-format-row").hidden && $("time_format").value !== "jd") q.set("time_format", $("time_format").value);
    if ($("budget").checked) q.set("budget", "1");
    if (hasCurve(state.calc)) for (const k of ["rv1", "rv2"]) if ($(`obs-${k}`).value.trim()) q.set(`observed.${k}`, $(`obs-${k}`).value.trim());
    return q;
  }

  function rememberInAddress(drawn) {
    const hash = `#${state.calc.name}?${formState(drawn).toString()}`;
    if (location.hash !== hash) history.replaceState(null, "", hash);
  }

  function applyState(q) {
    for (const spec of state.calc.inputs) {
      if (q.has(spec.name)) $(`in-${spec.name}`).value = q.get(spec.name);
      for (const part of ["sigma", "unit"]) {
        const c = $(`${part}-${spec.name}`);
        if (c && q.has(`${spec.name}.${part}`)) c.value = q.get(`${spec.name}.${part}`);
      }
    }
    const mc = q.get("uncertainty") === "monte_carlo";
    $(mc ? "method-mc" : "method-linear").checked = true;
    toggleMethod();
    if (q.has("samples")) $("samples").value = q.get("samples");
    $("seed").value = q.get("seed") || "";
    $("correlations").value = q.get("correlations") || "";
    if (q.has("time_format")) $("time_format").value = q.get("time_format");
    $("budget").checked = q.get("budget") === "1";
    for (const k of ["rv1", "rv2"]) $(`obs-${k}`).value = q.get(`observed.${k}`) || "";
  }

  function openAddress() {
    // the calculation before "?", the fields after it; with fields, compute at once
    const [name, query] = location.hash.slice(1).split(/\?(.*)/s);
    const calcName = decodeURIComponent(name || "");
    if (!state.calc || state.calc.name !== calcName || query) selectCalculation(calcName, Boolean(query));
    if (query && state.calc.name === calcName) {
      applyState(new URLSearchParams(query));
      compute();
    }
  }

  async function copyLink() {
    rememberInAddress(state.response && state.response.uncertainty);
    const link = location.href;
    let done = false;
    try {
      if (navigator.clipboard && window.isSecureContext) { await navigator.clipboard.writeText(link); done = true; }
    } catch (e) { done = false; }
    $("link-status").textContent = done ? "Link copied: it reopens this form and computes it again."
      : `Copy this link (it reopens this form and computes it again): ${link}`;
    $("link-status").dataset.link = link;
    show($("link-status"), true);
  }

  // ------------------------------------------------------------------ example and wiring
  // an example's number as an astronomer writes it: 2.4e-5 rather than JavaScript's 0.000024
  function exampleText(x) {
    return typeof x === "number" && x !== 0 && Math.abs(x) < 1e-3 ? x.toExponential() : String(x);
  }

  function fillExample() {
    const calc = state.calc;
    buildForm(calc);
    const ex = calc.example || {};
    $("method-linear").checked = true;           // the example's own method, linear unless it says otherwise
    toggleMethod();
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
        input.value = v.value !== undefined ? exampleText(v.value) : "";
        const sig = $(`sigma-${name}`), unit = $(`unit-${name}`);
        if (sig && v.sigma !== undefined) sig.value = exampleText(v.sigma);
        if (sig && v.sigma_plus !== undefined) sig.value = `+${exampleText(v.sigma_plus)} -${exampleText(v.sigma_minus)}`;
        if (unit && v.unit) unit.value = v.unit;
      } else input.value = exampleText(v);
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
    $("clear").addEventListener("click", () => {
      buildForm(state.calc);
      history.replaceState(null, "", "#" + state.calc.name);      // the address forgets the inputs too
    });
    for (const r of document.querySelectorAll('input[name="method"]')) r.addEventListener("change", toggleMethod);
    $("report-latex").addEventListener("click", () => loadReport("latex"));
    $("report-markdown").addEventListener("click", () => loadReport("markdown"));
    $("copy-report").addEventListener("click", copyReport);
    $("download-csv").addEventListener("click", () => downloadResults("csv"));
    $("download-json").addEventListener("click", () => downloadResults("json"));
    $("copy-link").addEventListener("click", copyLink);
    wireCatalogue();
    window.addEventListener("hashchange", openAddress);
    try {
      const [health, listing] = await Promise.all([request("GET", "v1/health"), request("GET", "v1/calculations")]);
      if (health.ok) $("version").textContent = `version ${health.data.version}`;
      state.calcs = listing.data.calculations;
      state.byName = Object.fromEntries(state.calcs.map((c) => [c.name, c]));
      fillCalculations();
      openAddress();
      document.body.dataset.ready = "true";
    } catch (err) {
      showProblem({ title: "No answer", detail: `cannot load the calculations: ${err}` });
    }
  }

  // for the browser tests: show a response of the documented shape as the page would (no request made)
  window.calcserviceForm = { show: (response) => renderResponse(state.calc, response), mathNodes };

  document.addEventListener("DOMContentLoaded", init);
})();
