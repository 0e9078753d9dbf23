// chiropt report page: draws the embedded data as inline SVG. No network, no libraries.
"use strict";
(function () {
  const DATA = JSON.parse(document.getElementById("report-data").textContent);
  const NS = "http://www.w3.org/2000/svg";
  const RUN_COLOURS = ["#1f6f8b", "#c8553d", "#5b8e3e", "#8e5ba8", "#c99a1b", "#4a4a4a",
                       "#2b9eb3", "#a23b72"];
  const LUT = DATA.colormap;
  const state = {run: 0, sel: {}};

  // ---------------------------------------------------------------- small helpers
  function h(tag, attrs, ...kids) {
    const e = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (v === null || v === undefined) continue;
      if (k === "text") e.textContent = v; else if (k === "cls") e.className = v;
      else if (k.startsWith("on")) e.addEventListener(k.slice(2), v); else e.setAttribute(k, v);
    }
    for (const c of kids.flat()) if (c !== null && c !== undefined)
      e.append(c instanceof Node ? c : document.createTextNode(String(c)));
    return e;
  }
  function s(tag, attrs, ...kids) {
    const e = document.createElementNS(NS, tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (v === null || v === undefined) continue;
      if (k === "text") e.textContent = v;
      else if (k.startsWith("on")) e.addEventListener(k.slice(2), v); else e.setAttribute(k, v);
    }
    for (const c of kids.flat()) if (c) e.append(c);
    return e;
  }
  function fmt(v, d) {
    if (v === null || v === undefined) return "–";
    if (typeof v === "boolean") return v ? "yes" : "no";
    if (typeof v !== "number") return String(v);
    if (!isFinite(v)) return "–";
    const a = Math.abs(v);
    if (a !== 0 && (a < 1e-3 || a >= 1e6)) return v.toExponential((d || 4) - 1);
    return Number(v.toPrecision(d || 4)).toString();
  }
  function colour(t) {
    const i = Math.max(0, Math.min(LUT.length - 1, Math.round(t * (LUT.length - 1))));
    return LUT[isFinite(i) ? i : 0];
  }
  function table(head, rows, numeric) {
    return h("table", {}, h("thead", {}, h("tr", {}, head.map(x => h("th", {text: x})))),
      h("tbody", {}, rows.map(r => h("tr", {}, r.map((c, j) =>
        h("td", {cls: (numeric || []).includes(j) ? "num" : null},
          c instanceof Node ? c : fmt(c)))))));
  }
  function card(title, ...kids) {
    return h("section", {cls: "card"}, h("h2", {text: title}), ...kids);
  }
  function fact(k, v) { return h("div", {cls: "fact"}, h("div", {cls: "k", text: k}),
                                 h("div", {cls: "v"}, v)); }
  function duration(sec) {
    if (!sec) return "0 s";
    const hh = Math.floor(sec / 3600), mm = Math.floor((sec % 3600) / 60);
    return hh ? `${hh} h ${mm} min` : mm ? `${mm} min ${Math.round(sec % 60)} s`
      : `${sec.toFixed(1)} s`;
  }

  // ------------------------------------------------------------------- the chart
  function ticks(lo, hi, n) {
    if (!(hi > lo)) { const d = Math.abs(lo) * 0.05 || 0.5; lo -= d; hi += d; }
    const raw = (hi - lo) / (n || 5), mag = Math.pow(10, Math.floor(Math.log10(raw)));
    const step = [1, 2, 2.5, 5, 10].map(m => m * mag).find(x => x >= raw) || 10 * mag;
    const out = [];
    for (let t = Math.ceil(lo / step) * step; t <= hi + step * 1e-9; t += step)
      out.push(Math.abs(t) < step * 1e-9 ? 0 : t);
    return {lo: lo, hi: hi, ticks: out};
  }
  function extent(values, pad) {
    const v = values.filter(x => x !== null && isFinite(x));
    if (!v.length) return [0, 1];
    let lo = Math.min(...v), hi = Math.max(...v);
    const d = (hi - lo) * (pad === undefined ? 0.06 : pad) || Math.abs(hi) * 0.05 || 0.5;
    return [lo - d, hi + d];
  }
  // a plot frame: returns {svg, g, x, y}; opts: w, h, xr, yr, xlabel, ylabel, id
  function frame(opts) {
    const W = opts.w || 460, H = opts.h || 320, m = {l: 58, r: opts.mr || 14, t: 12, b: 44};
    const xt = ticks(opts.xr[0], opts.xr[1], opts.nx || 6);
    const yt = ticks(opts.yr[0], opts.yr[1], opts.ny || 5);
    const x = v => m.l + (v - xt.lo) / (xt.hi - xt.lo) * (W - m.l - m.r);
    const y = v => H - m.b - (v - yt.lo) / (yt.hi - yt.lo) * (H - m.t - m.b);
    const svg = s("svg", {width: W, height: H, viewBox: `0 0 ${W} ${H}`, id: opts.id,
                          role: "img", "aria-label": opts.label || ""});
    const axis = s("g", {class: "axis"});
    for (const t of xt.ticks) {
      axis.append(s("line", {class: "gridline", x1: x(t), x2: x(t), y1: m.t, y2: H - m.b}));
      axis.append(s("text", {x: x(t), y: H - m.b + 15, "text-anchor": "middle",
                             "font-size": 11, text: fmt(t, 4)}));
    }
    for (const t of yt.ticks) {
      axis.append(s("line", {class: "gridline", x1: m.l, x2: W - m.r, y1: y(t), y2: y(t)}));
      axis.append(s("text", {x: m.l - 6, y: y(t) + 4, "text-anchor": "end", "font-size": 11,
                             text: fmt(t, 4)}));
    }
    axis.append(s("path", {d: `M${m.l},${m.t}V${H - m.b}H${W - m.r}`, fill: "none"}));
    axis.append(s("text", {x: (m.l + W - m.r) / 2, y: H - 8, "text-anchor": "middle",
                           "font-size": 12, text: opts.xlabel || ""}));
    axis.append(s("text", {transform: `translate(14,${(m.t + H - m.b) / 2}) rotate(-90)`,
                           "text-anchor": "middle", "font-size": 12, text: opts.ylabel || ""}));
    svg.append(axis);
    const clip = "c" + Math.random().toString(36).slice(2);
    svg.append(s("clipPath", {id: clip}, s("rect", {x: m.l, y: m.t, width: W - m.l - m.r,
                                                  height: H - m.t - m.b})));
    const g = s("g", {"clip-path": `url(#${clip})`});
    svg.append(g);
    return {svg: svg, g: g, x: x, y: y, W: W, H: H, m: m};
  }
  function line(f, xs, ys, attrs) {
    let d = "", pen = false;
    xs.forEach((xv, i) => {
      const yv = ys[i];
      if (yv === null || xv === null || !isFinite(yv)) { pen = false; return; }
      d += (pen ? "L" : "M") + f.x(xv).toFixed(1) + "," + f.y(yv).toFixed(1); pen = true;
    });
    f.g.append(s("path", Object.assign({d: d, fill: "none", "stroke-width": 1.6}, attrs)));
  }
  function legend(items) {
    return h("div", {cls: "legend"}, items.map(([c, t, dash]) => h("span", {},
      h("i", {style: `background:${dash ? "repeating-linear-gradient(90deg," + c + " 0 4px," +
        "transparent 4px 6px)" : c}`}), t)));
  }
  function colourBar(f, lo, hi, label) {
    const id = "g" + Math.random().toString(36).slice(2), x0 = f.W - 10, top = f.m.t + 4;
    const bottom = f.H - f.m.b - 4;
    const grad = s("linearGradient", {id: id, x1: 0, y1: 1, x2: 0, y2: 0});
    LUT.forEach((c, i) => grad.append(s("stop", {offset: i / (LUT.length - 1),
                                                 "stop-color": c})));
    f.svg.append(s("defs", {}, grad));
    f.svg.append(s("rect", {x: x0, y: top, width: 8, height: bottom - top, fill: `url(#${id})`,
                            stroke: "#999", "stroke-width": 0.5}));
    f.svg.append(s("text", {x: x0 + 4, y: top - 2, "text-anchor": "end", "font-size": 10,
                            text: fmt(hi, 3)}));
    f.svg.append(s("text", {x: x0 + 4, y: bottom + 11, "text-anchor": "end", "font-size": 10,
                            text: fmt(lo, 3)}));
    f.svg.append(s("text", {transform: `translate(${x0 - 4},${(top + bottom) / 2}) rotate(-90)`,
                            "text-anchor": "middle", "font-size": 10, text: label}));
  }

  // ------------------------------------------------------------------ the front
  function frontFigure(run, ri) {
    const M = run.labels.length, rows = run.front;
    const obj = rows.map(r => run.labels.map(l => r[l]));
    const conf = run.groups.confirmation.filter(c => c.endsWith("(confirmed)"));
    const cvals = conf.length === M ? rows.map(r => conf.map(c => r[c])) : null;
    const X = M === 2 ? k => obj[k][0] : k => k, Y = M === 2 ? k => obj[k][1] : k => obj[k][0];
    const cloud = run.cloud.feasible.concat(run.cloud.infeasible);
    const xs = M === 2 ? cloud.map(p => p[0]).concat(obj.map(p => p[0]))
      : [0, Math.max(rows.length - 1, 1)];
    const ys = (M === 2 ? cloud.map(p => p[1]) : []).concat(obj.map(p => p[M - 1]))
      .concat(cvals ? cvals.map(p => p[M - 1]) : []);
    const f = frame({w: 520, h: 380, xr: extent(xs), yr: extent(ys), id: `front-${ri}`,
                     xlabel: M === 2 ? run.labels[0] : "front design (best of each search)",
                     ylabel: run.labels[M - 1], label: "front of the run", mr: 64});
    if (M === 2) {
      for (const p of run.cloud.infeasible)
        f.g.append(s("path", {d: `M${f.x(p[0]) - 2},${f.y(p[1]) - 2}l4,4m0,-4l-4,4`,
                              stroke: "#c9c4ba", "stroke-width": 1}));
      for (const p of run.cloud.feasible)
        f.g.append(s("circle", {cx: f.x(p[0]), cy: f.y(p[1]), r: 1.8, fill: "#b3b8bc",
                                "fill-opacity": 0.7}));
      const ref = run.reference;
      f.g.append(s("path", {d: `M${f.x(ref[0]) - 5},${f.y(ref[1])}h10M${f.x(ref[0])},` +
        `${f.y(ref[1]) - 5}v10`, stroke: "#20303b", "stroke-width": 1.5}));
    }
    line(f, rows.map((_, k) => X(k)), rows.map((_, k) => Y(k)),
         {stroke: "#20303b", "stroke-opacity": 0.35, "stroke-width": 1.2});
    const cv = run.colour ? rows.map(r => r[run.colour]) : null;
    const [clo, chi] = cv ? extent(cv, 0) : [0, 1];
    if (cvals) rows.forEach((_, k) => {
      const cx = M === 2 ? cvals[k][0] : k, cy = cvals[k][M - 1];
      if (cy === null || cy === undefined) return;
      f.g.append(s("line", {x1: f.x(X(k)), y1: f.y(Y(k)), x2: f.x(cx), y2: f.y(cy),
                            stroke: "#7a6f5a", "stroke-dasharray": "2 2"}));
      f.g.append(s("rect", {x: f.x(cx) - 3.5, y: f.y(cy) - 3.5, width: 7, height: 7,
                            fill: "none", stroke: "#7a6f5a", "stroke-width": 1.2}));
    });
    rows.forEach((r, k) => {
      const t = cv && chi > clo ? (cv[k] - clo) / (chi - clo) : 0.5;
      const c = s("circle", {class: "pt", cx: f.x(X(k)), cy: f.y(Y(k)), r: 5.5,
                             fill: colour(t), stroke: "#20303b", "stroke-width": 0.7,
                             "data-index": k, tabindex: 0,
                             onclick: () => select(ri, k)},
                  s("title", {text: `design ${k}: ` + run.labels.map(
                    (l, j) => `${l} = ${fmt(obj[k][j])}`).join(", ")}));
      f.g.append(c);
    });
    f.svg.append(s("circle", {class: "sel", id: `sel-${ri}`, r: 9, cx: -20, cy: -20}));
    if (cv) colourBar(f, clo, chi, run.colour);
    const items = [["#b3b8bc", "feasible evaluations"], ["#c9c4ba", "infeasible (×)"],
                   ["#20303b", "reference point (+)"]];
    if (cvals) items.push(["#7a6f5a", "confirmed value (square)", true]);
    const wrap = h("div", {}, f.svg, legend(M === 2 ? items : []),
      h("div", {cls: "small muted", text: "Click a point (or use ← →) to show that design." +
        (cv ? ` Colour: ${run.colour}.` : "")}));
    wrap.place = (k) => {
      const ring = f.svg.querySelector(`#sel-${ri}`);
      ring.setAttribute("cx", f.x(X(k))); ring.setAttribute("cy", f.y(Y(k)));
    };
    return wrap;
  }

  // ----------------------------------------------------------------- the detail
  function spectrumChart(d, keys, ylabel, styles) {
    const sp = d.spectra, wl = sp.wavelength_nm;
    const all = keys.flatMap(k => sp[k] || []);
    const f = frame({w: 330, h: 210, xr: [wl[0], wl[wl.length - 1]], yr: extent(all),
                     xlabel: "wavelength (nm)", ylabel: ylabel, nx: 4, ny: 4});
    for (const [w] of d.rayleigh) f.g.append(s("line", {x1: f.x(w), x2: f.x(w), y1: 0,
      y2: f.H, stroke: "#c8553d", "stroke-width": 0.8, "stroke-dasharray": "1 3"}));
    f.g.append(s("line", {x1: f.x(d.operating_nm), x2: f.x(d.operating_nm), y1: 0, y2: f.H,
                          stroke: "#20303b", "stroke-width": 0.9, "stroke-dasharray": "5 3"}));
    keys.forEach((k, i) => { if (sp[k]) line(f, wl, sp[k], styles[i]); });
    return f.svg;
  }
  function mapFigure(m, cell, title) {
    const n = m.n, cv = document.createElement("canvas");
    cv.width = n; cv.height = n;
    const ctx = cv.getContext("2d"), img = ctx.createImageData(n, n);
    const q = atob(m.b64);
    for (let i = 0; i < n; i++) for (let j = 0; j < n; j++) {
      const c = colour(q.charCodeAt(i * n + j) / 255);   // value at (i a1 + j a2) / n
      const p = 4 * (j * n + i);                           // pixel column i, row j
      img.data[p] = parseInt(c.slice(1, 3), 16); img.data[p + 1] = parseInt(c.slice(3, 5), 16);
      img.data[p + 2] = parseInt(c.slice(5, 7), 16); img.data[p + 3] = 255;
    }
    ctx.putImageData(img, 0, 0);
    const [a1, a2] = [cell.a1, cell.a2];
    const xs = [0, a1[0], a2[0], a1[0] + a2[0]], ys = [0, a1[1], a2[1], a1[1] + a2[1]];
    const span = Math.max(Math.max(...xs) - Math.min(...xs), Math.max(...ys) - Math.min(...ys));
    const S = 150 / span, ox = 8 - Math.min(...xs) * S, oy = 8 + Math.max(...ys) * S;
    const W = (Math.max(...xs) - Math.min(...xs)) * S + 16;
    const H = (Math.max(...ys) - Math.min(...ys)) * S + 16;
    const svg = s("svg", {width: W, height: H, viewBox: `0 0 ${W} ${H}`});
    svg.append(s("image", {href: cv.toDataURL(), width: 1, height: 1,
      preserveAspectRatio: "none", transform: `matrix(${S * a1[0]},${-S * a1[1]},` +
      `${S * a2[0]},${-S * a2[1]},${ox},${oy})`}));
    for (const [cx, cy, r] of cell.circles) for (const di of [0, 1]) for (const dj of [0, 1])
      svg.append(s("circle", {cx: ox + S * (cx + di * a1[0] + dj * a2[0]),
        cy: oy - S * (cy + di * a1[1] + dj * a2[1]), r: S * r, fill: "none",
        stroke: "#fff", "stroke-dasharray": "2 2", "stroke-width": 0.9}));
    const lo = m.lo, hi = m.hi;
    const bar = h("div", {cls: "small muted"}, `${fmt(lo, 3)} `,
      h("span", {style: `display:inline-block;width:80px;height:8px;vertical-align:middle;` +
        `background:linear-gradient(90deg,${LUT.filter((_, i) => i % 8 === 0).join(",")})`}),
      ` ${fmt(hi, 3)}`);
    return h("figure", {}, svg, h("figcaption", {text: title}), bar);
  }
  function detailView(run, ri, k) {
    // two parts: beside the front (what the design is) and below it (what it does)
    const row = run.front[k], d = run.details[String(k)], g = run.groups;
    const top = h("div", {id: `detail-${ri}`, cls: "detail", "data-index": k});
    const low = h("div", {id: `detail-low-${ri}`, "data-index": k});
    const cand = run.candidates[String(k)];
    const check = row.model_check;
    top.append(h("div", {id: "detail-head"},
      h("h3", {cls: "detail-title", text: `Front design ${k}`}),
      check ? h("span", {cls: "pill" + (check === "failed" ? " bad" : ""),
                         text: `model check ${check}`}) : null,
      row.feasible === false ? h("span", {cls: "pill bad", text: "infeasible"}) : null,
      cand ? h("a", {href: cand, text: `candidate file ${cand.split("/").pop()}`}) : null));
    const vals = cols => cols.map(c => [c, row[c]]);
    const blocks = [["Parameters", g.parameters], ["Objectives", g.objectives],
                    ["Metrics", g.metrics], ["Model validity", g.validity],
                    ["Confirmation", g.confirmation], ["Other columns", g.other],
                    ["Where it was found", ["stage", "search", "seq", "max_violation"]]];
    const tabs = h("div", {cls: "facts"});
    for (const [title, cols] of blocks) {
      if (!cols.length) continue;
      const extra = [];
      if (title === "Model validity" && d && d.nearest_rayleigh_nm)
        extra.push([`nearest Rayleigh anomaly, ${d.nearest_rayleigh_nm[1]} (nm from ` +
                    `${fmt(d.operating_nm)} nm)`, d.nearest_rayleigh_nm[0]]);
      tabs.append(h("div", {}, h("h3", {text: title}),
                    table(["quantity", "value"], vals(cols).concat(extra), [1])));
    }
    top.append(tabs);
    if (!d) {
      low.append(h("p", {cls: "muted", text: "Spectra and maps were computed for a spread " +
        "of front designs only (report option --details); pick a neighbouring design."}));
      return [top, low];
    }
    if (d.errors.length) low.append(h("ul", {cls: "warnings"}, d.errors.map(
      e => h("li", {text: e}))));
    if (d.spectra) {
      const pl = {stroke: "#1f6f8b"}, mi = {stroke: "#1f6f8b", "stroke-dasharray": "5 3"};
      const far = spectrumChart(d, ["R+1", "R-1", "T+1", "T-1", "A+1", "A-1"],
        "power fraction", [pl, mi, {stroke: "#5b8e3e"}, {stroke: "#5b8e3e",
        "stroke-dasharray": "5 3"}, {stroke: "#c8553d"}, {stroke: "#c8553d",
        "stroke-dasharray": "5 3"}]);
      const kids = [h("div", {}, far, legend([["#1f6f8b", "R"], ["#5b8e3e", "T"],
        ["#c8553d", "A"], ["#555", "helicity −1 dashed", true]]))];
      if (d.spectra.u) {
        kids.push(h("div", {}, spectrumChart(d, ["u", "g"], "region average",
          [{stroke: "#8e5ba8"}, {stroke: "#c99a1b"}]), legend([["#8e5ba8", "u"],
          ["#c99a1b", "g"]])));
        kids.push(h("div", {}, spectrumChart(d, ["docp+1", "docp-1"], "DOCP",
          [{stroke: "#2b9eb3"}, {stroke: "#2b9eb3", "stroke-dasharray": "5 3"}]),
          legend([["#2b9eb3", "DOCP +1"], ["#2b9eb3", "DOCP −1", true]])));
      }
      low.append(h("h3", {text: `Spectra of design ${k} (dashed line: operating ` +
        `wavelength ${fmt(d.operating_nm)} nm; dotted: Rayleigh anomalies)`}),
        h("div", {cls: "grid3"}, kids));
    }
    const near = h("div", {cls: "grid2"});
    if (d.maps) {
      near.append(h("div", {}, h("h3", {text: `Near field over one cell at ` +
        `${fmt(d.operating_nm)} nm, plane z = ${fmt(d.maps.z_nm, 3)} nm (dashed: particles)`}),
        h("div", {cls: "grid3 maps"}, mapFigure(d.maps.u, d.cell, "intensity enhancement u"),
          mapFigure(d.maps.g, d.cell, "CD enhancement g"),
          mapFigure(d.maps["docp+1"], d.cell, "DOCP, helicity +1"))));
    }
    if (d.orders.length) {
      near.append(h("div", {}, h("h3", {text: `Diffraction orders at ` +
        `${fmt(d.operating_nm)} nm (largest shares of the region's intensity)`}), table(
        ["order", "K", "kind", "share", "g", "DOCP +1", "DOCP −1", "CD bound"],
        d.orders.map(o => [o.order, o.K, o.evanescent ? "evanescent" : "propagating",
                           o.share, o.g, o["docp+1"], o["docp-1"], o.bound]),
        [1, 3, 4, 5, 6, 7])));
    }
    low.append(near, h("details", {}, h("summary", {text: `design file of design ${k} (YAML)`}),
                       h("pre", {text: d.yaml})));
    return [top, low];
  }
  function select(ri, k) {
    const run = DATA.runs[ri];
    if (k < 0 || k >= run.front.length) return;
    state.sel[ri] = k;
    const [top, low] = detailView(run, ri, k);
    document.getElementById(`detail-${ri}`).replaceWith(top);
    document.getElementById(`detail-low-${ri}`).replaceWith(low);
    const fig = document.getElementById(`frontwrap-${ri}`);
    if (fig && fig.place) fig.place(k);
  }

  // ------------------------------------------------------------ other sections
  function goalCard(run) {
    const g = run.goal, b = run.budget;
    const facts = h("div", {cls: "facts"},
      fact("status", h("span", {cls: run.status === "complete" ? "okay" : "bad",
                                text: run.status || "unknown"})),
      fact("evaluations", `${b.evaluations} (${b.failed} failed, ${b.feasible} feasible)` +
        (b.budget_evaluations ? ` of a budget of ${b.budget_evaluations}` : "")),
      fact("time", `${duration(b.span_s)} elapsed, ${duration(b.solve_time_s)} of solves` +
        (b.budget_wall_time ? `; budget ${b.budget_wall_time}` : "")),
      fact("front", `${run.front.length} designs` + (run.hypervolume !== null &&
        run.hypervolume !== undefined ? `, hypervolume ${fmt(run.hypervolume)}` : "")),
      fact("reference point", run.reference.map(fmt).join(", ")),
      fact("material", g.material || "as in the design"));
    const kids = [facts];
    if (g.description) kids.push(h("p", {text: g.description}));
    kids.push(h("div", {cls: "grid2"}, h("div", {},
      h("h3", {text: "Objectives and constraints"}),
      table(["", "quantity"], g.objectives.map(o => [o.sense === "max" ? "maximize"
        : "minimize", o.label]).concat(g.constraints.map(c => ["constraint", c]))),
      h("h3", {text: "Variables"}),
      table(["variable", "min", "max"], g.variables.map(v => [v.path, v.min, v.max]), [1, 2])),
      h("div", {}, h("h3", {text: "Search"}), table(["setting", "value"], [
        ["algorithm", g.search.algorithm], ["starts", g.search.starts],
        ["evaluations per search", g.search.max_evals_per_start],
        ["front", `${g.search.front.method}, ${g.search.front.points} points`],
        ["model", JSON.stringify(g.model)], ["seed", g.seed],
        ["by stage", Object.entries(b.by_stage).map(([k, v]) => `${k} ${v}`).join(", ")]]),
        h("h3", {text: "Materials"}),
        table(["used as", "name", "data", "range (nm)", "reference"], run.materials.map(m =>
          [m.used_as, m.name, m.source, `${fmt(m.range_nm[0])}–${fmt(m.range_nm[1])}`,
           m.reference]), []))));
    if (run.warnings.length) kids.push(h("h3", {text: "Warnings of the run"}),
      h("ul", {cls: "warnings"}, run.warnings.map(w => h("li", {text: w}))));
    return card(`Goal ${g.name}` + (g.material ? ` with ${g.material}` : ""), ...kids);
  }
  function convergenceCard(run) {
    const c = run.convergence, keys = Object.keys(c.searches);
    const longest = Math.max(1, ...keys.map(k => c.searches[k].length));
    const f1 = frame({w: 460, h: 260, xr: [0, c.overall.length], yr: extent(c.overall),
      xlabel: "evaluation of the run (store order)", ylabel: c.quantity, id: null});
    line(f1, c.overall.map((_, i) => i + 1), c.overall, {stroke: "#20303b", "stroke-width": 2});
    const all = keys.flatMap(k => c.searches[k]);
    const f2 = frame({w: 460, h: 260, xr: [0, longest], yr: extent(all),
      xlabel: "evaluation of the search", ylabel: c.quantity});
    keys.forEach((k, i) => line(f2, c.searches[k].map((_, j) => j + 1), c.searches[k],
      {stroke: RUN_COLOURS[i % RUN_COLOURS.length], "stroke-width": 1.3}));
    return card("Convergence", h("div", {cls: "grid2"},
      h("div", {}, h("h3", {text: "whole run"}), f1.svg),
      h("div", {}, h("h3", {text: "each search"}), f2.svg, legend(keys.map((k, i) =>
        [RUN_COLOURS[i % RUN_COLOURS.length], k])))));
  }
  function problemsCard(run) {
    const f = run.failures, kids = [];
    kids.push(h("h3", {text: `Failed evaluations (${run.budget.failed})`}));
    kids.push(f.length ? table(["reason", "count", "searches", "first designs"], f.map(x =>
      [x.reason, x.count, x.searches.join(", "), x.examples.map(e => Object.values(e)
        .map(v => fmt(v)).join(" / ")).join("; ")]), [1])
      : h("p", {cls: "muted", text: "No evaluation failed."}));
    kids.push(h("h3", {text: "Constraint activity (scaled constraint rows; active: within " +
                              "0.1% of the bound)"}));
    kids.push(run.constraints.length ? table(["constraint", "violated", "active",
      "active on the front", "largest on the front"], run.constraints.map(x =>
      [x.constraint, `${fmt(100 * x.violated, 3)} %`, `${fmt(100 * x.active, 3)} %`,
       `${x.front_active} of ${run.front.length}`, x.front_max]), [1, 2, 3, 4])
      : h("p", {cls: "muted", text: "The goal has no constraints."}));
    return card("Failures and constraints", ...kids);
  }
  function runSection(run, ri) {
    const sec = h("div", {cls: "run", id: `run-${ri}`, "data-run": run.name});
    sec.append(goalCard(run));
    const wrap = frontFigure(run, ri);
    wrap.id = `frontwrap-${ri}`;
    sec.append(card(`Front of ${run.name} (${run.front.length} designs)`,
                    h("div", {cls: "grid2"}, wrap, h("div", {id: `detail-${ri}`})),
                    h("div", {id: `detail-low-${ri}`})));
    sec.append(convergenceCard(run), problemsCard(run));
    return sec;
  }
  function comparisonCard() {
    const c = DATA.comparison, runs = DATA.runs, M = runs[0].labels.length;
    const right = h("div", {}, runTable(c, runs));
    right.append(h("h3", {text: "Which run holds the combined front where (best " +
                                runs[0].labels[0] + " first)"}));
    right.append(table(["run", "points"].concat(runs[0].labels.map(l => `${l} range`))
      .concat(M === 2 ? ["hypervolume only this stretch adds", "share"] : []),
      c.stretches.map(x => [c.names[x.run], x.points].concat(x.ranges.map(r =>
        `${fmt(r[0])} – ${fmt(r[1])}`)).concat(M === 2 ? [x.exclusive_hypervolume,
        x.share === null ? null : `${fmt(100 * x.share, 3)} %`] : [])), [1, 4, 5]));
    right.append(h("h3", {text: "Coverage: share of the column run's front that the row " +
                                "run's front weakly dominates"}));
    right.append(table([""].concat(c.names), c.coverage.map((row, a) => [c.names[a]].concat(
      row.map(v => v === null ? null : `${fmt(100 * v, 3)} %`))),
      c.names.map((_, i) => i + 1)));
    if (M !== 2) return card("Runs compared", right);
    const pts = runs.flatMap(r => r.front.map(x => [x[r.labels[0]], x[r.labels[1]]]));
    const f = frame({w: 560, h: 380, xr: extent(pts.map(p => p[0]).concat([c.reference[0]])),
      yr: extent(pts.map(p => p[1]).concat([c.reference[1]])), xlabel: runs[0].labels[0],
      ylabel: runs[0].labels[1], id: "overlay"});
    runs.forEach((r, ri) => {
      const col = RUN_COLOURS[ri % RUN_COLOURS.length];
      line(f, r.front.map(x => x[r.labels[0]]), r.front.map(x => x[r.labels[1]]),
           {stroke: col, "stroke-width": 1.4});
      r.front.forEach((x, k) => f.g.append(s("circle", {class: "pt overlay-pt", r: 4.5,
        cx: f.x(x[r.labels[0]]), cy: f.y(x[r.labels[1]]), fill: col, stroke: "#fff",
        "data-run": ri, "data-index": k,
        onclick: () => { show(ri); select(ri, k); document.getElementById(`run-${ri}`)
          .scrollIntoView(); }}, s("title", {text: `${r.name}, design ${k}`}))));
    });
    const ref = c.reference;
    f.g.append(s("path", {d: `M${f.x(ref[0]) - 5},${f.y(ref[1])}h10M${f.x(ref[0])},` +
      `${f.y(ref[1]) - 5}v10`, stroke: "#20303b", "stroke-width": 1.5}));
    return card("Runs compared", h("div", {cls: "grid2"}, h("div", {}, f.svg,
      legend(runs.map((r, i) => [RUN_COLOURS[i % RUN_COLOURS.length], r.name])
        .concat([["#20303b", "common reference point (+)"]])),
      h("div", {cls: "small muted", text: "Click a point to open that run's design."})),
      right));
  }
  function runTable(c, runs) {
    return h("div", {}, h("p", {cls: "small muted", text: `Hypervolume at one reference ` +
      `point (${c.reference.map(fmt).join(", ")}): ${c.reference_source}.`}),
      table(["run", "status", "evaluations", "front", "hypervolume"].concat(runs[0].labels
        .map((l, j) => `best ${l}`)), runs.map((r, i) => [r.name, r.status,
        r.budget.evaluations, r.front.length, c.hypervolume[i]].concat(r.labels.map((l, j) => {
          const v = r.front.map(x => x[l]);
          return v.length ? (r.senses[j] === "max" ? Math.max(...v) : Math.min(...v)) : null;
        }))), [2, 3, 4, 5, 6]));
  }
  function show(ri) {
    state.run = ri;
    document.querySelectorAll("div.run").forEach((e, i) => { e.hidden = i !== ri; });
    document.querySelectorAll("nav button").forEach((e, i) => e.classList.toggle("on",
                                                                                   i === ri));
  }

  // ---------------------------------------------------------------------- build
  function build() {
    const runs = DATA.runs, main = document.getElementById("main");
    document.getElementById("noscript").remove();
    document.getElementById("heading").append(h("h1", {text: runs.length === 1
      ? `Run ${runs[0].name}` : `${runs.length} runs: ${runs.map(r => r.name).join(", ")}`}),
      h("div", {cls: "sub", text: `written ${DATA.generated} by chiropt ${DATA.version} ` +
        `from ${runs.map(r => r.path).join(", ")}`}));
    if (DATA.comparison) main.append(comparisonCard());
    if (runs.length > 1) {
      const nav = document.getElementById("runs-nav");
      runs.forEach((r, i) => nav.append(h("button", {onclick: () => show(i)},
        h("span", {cls: "swatch", style: `background:${RUN_COLOURS[i % RUN_COLOURS.length]}`}),
        r.name)));
    }
    runs.forEach((r, i) => main.append(runSection(r, i)));
    runs.forEach((r, i) => { if (r.front.length) select(i, 0); });
    show(0);
    document.addEventListener("keydown", e => {
      if (e.key !== "ArrowRight" && e.key !== "ArrowLeft") return;
      const k = state.sel[state.run];
      if (k === undefined) return;
      select(state.run, k + (e.key === "ArrowRight" ? 1 : -1));
    });
    document.getElementById("foot").textContent = "Figures computed by chiropt from each " +
      "run folder's store and front table; the page needs no network.";
  }
  build();
})();
