// Plumbline's series chart: readings, the forecast and its band, alerts
// (a marker at detected_at, a dashed line at change_at), annotations as
// shaded spans and, in replay reports, labelled changes. Plain SVG, no
// libraries; shared by the status page and the replay report.
"use strict";

const PlumblineChart = (() => {
  const SVG = "http://www.w3.org/2000/svg";
  const PAD = { left: 56, right: 12, top: 18, bottom: 26 };
  let clipCount = 0;  // each chart's clip path needs its own id

  function el(name, attrs, parent) {
    const node = document.createElementNS(SVG, name);
    for (const [key, value] of Object.entries(attrs)) node.setAttribute(key, value);
    if (parent) parent.appendChild(node);
    return node;
  }

  function extent(values) {
    let low = Infinity, high = -Infinity;
    for (const v of values) {
      if (Number.isFinite(v)) { low = Math.min(low, v); high = Math.max(high, v); }
    }
    if (!Number.isFinite(low)) return [0, 1];
    if (low === high) return [low - 1, high + 1];
    const margin = (high - low) * 0.06;
    return [low - margin, high + margin];
  }

  function formatTime(ms) {
    return new Date(ms).toISOString().replace(".000Z", "Z");
  }

  function formatNumber(v) {
    return Number.isFinite(v) ? Number(v.toPrecision(5)).toString() : "–";
  }

  // Scales from data to pixels for a chart of the given size.
  function makeScales(data, width, height) {
    const times = data.points.map((p) => p.t);
    const [t0, t1] = times.length ? [times[0], times[times.length - 1]] : [0, 1];
    const span = t1 > t0 ? t1 - t0 : 1;
    // Readings and forecasts set the scale; a band wider than that (while
    // the model learns) is clipped rather than allowed to flatten the chart.
    const [v0, v1] = extent(data.points.flatMap((p) => [p.v, p.f]));
    return {
      t0, t1,
      x: (t) => PAD.left + ((t - t0) / span) * (width - PAD.left - PAD.right),
      y: (v) => PAD.top + (1 - (v - v0) / (v1 - v0)) * (height - PAD.top - PAD.bottom),
      v0, v1,
    };
  }

  function drawAxes(svg, s, width, height) {
    const axes = el("g", { class: "axes" }, svg);
    for (let i = 0; i <= 4; ++i) {
      const v = s.v0 + ((s.v1 - s.v0) * i) / 4;
      const y = s.y(v);
      el("line", { x1: PAD.left, x2: width - PAD.right, y1: y, y2: y, class: "grid" }, axes);
      el("text", { x: PAD.left - 6, y: y + 4, class: "tick", "text-anchor": "end" }, axes)
        .textContent = formatNumber(v);
    }
    for (const [t, anchor] of [[s.t0, "start"], [s.t1, "end"]]) {
      el("text", { x: s.x(t), y: height - 6, class: "tick", "text-anchor": anchor }, axes)
        .textContent = formatTime(t);
    }
  }

  function drawSpans(svg, s, spans, height) {
    for (const span of spans) {
      const from = Math.max(span.from, s.t0), to = Math.min(span.to, s.t1);
      if (to < from) continue;
      const rect = el("rect", {
        x: s.x(from), y: PAD.top, width: Math.max(2, s.x(to) - s.x(from)),
        height: height - PAD.top - PAD.bottom, class: "span " + span.kind,
      }, svg);
      el("title", {}, rect).textContent = `${span.id}: ${span.note || span.kind}`;
    }
  }

  // Clips drawing to the plot area; returns the clip's url for clip-path.
  function addClip(svg, width, height) {
    const id = `plot-clip-${++clipCount}`;
    const clip = el("clipPath", { id }, el("defs", {}, svg));
    el("rect", { x: PAD.left, y: PAD.top, width: width - PAD.left - PAD.right,
                 height: height - PAD.top - PAD.bottom }, clip);
    return `url(#${id})`;
  }

  // The band as one polygon per unbroken run of points that have a forecast.
  function drawForecast(svg, s, points) {
    let run = [];
    const flush = () => {
      if (run.length > 1) {
        const upper = run.map((p) => `${s.x(p.t)},${s.y(p.hi)}`);
        const lower = run.slice().reverse().map((p) => `${s.x(p.t)},${s.y(p.lo)}`);
        el("polygon", { points: upper.concat(lower).join(" "), class: "band" }, svg);
        el("polyline", { points: run.map((p) => `${s.x(p.t)},${s.y(p.f)}`).join(" "),
                         class: "forecast" }, svg);
      }
      run = [];
    };
    for (const p of points) {
      if (Number.isFinite(p.f) && Number.isFinite(p.lo) && Number.isFinite(p.hi)) {
        run.push(p);
      } else {
        flush();
      }
    }
    flush();
  }

  function drawReadings(svg, s, points) {
    el("polyline", { points: points.map((p) => `${s.x(p.t)},${s.y(p.v)}`).join(" "),
                     class: "readings" }, svg);
    const dots = el("g", { class: "points" }, svg);
    for (const p of points) {
      const outside = Number.isFinite(p.lo) && (p.v < p.lo || p.v > p.hi);
      el("circle", { cx: s.x(p.t), cy: s.y(p.v), r: 1.8,
                     class: outside ? "point outside" : "point" }, dots);
    }
  }

  function drawAlerts(svg, s, alerts, height) {
    const group = el("g", { class: "alerts" }, svg);
    for (const a of alerts) {
      if (a.detected_at < s.t0 || a.detected_at > s.t1) continue;
      const cls = "kind-" + a.kind + (a.annotation ? " explained" : "");
      if (a.change_at >= s.t0) {
        const x = s.x(a.change_at);
        el("line", { x1: x, x2: x, y1: PAD.top, y2: height - PAD.bottom,
                     class: "change-line " + cls }, group);
      }
      const x = s.x(a.detected_at);
      const mark = el("path", { d: `M${x - 5},${PAD.top - 12} h10 l-5,9 z`,
                                class: "alert-mark " + cls }, group);
      el("title", {}, mark).textContent =
          `${a.kind} ${a.direction} detected ${formatTime(a.detected_at)}, ` +
          `change began ${formatTime(a.change_at)}` +
          (a.annotation ? ` (expected: ${a.annotation})` : "");
    }
  }

  function drawLabels(svg, s, labels, height) {
    const group = el("g", { class: "labels" }, svg);
    for (const label of labels) {
      if (label.at < s.t0 || label.at > s.t1) continue;
      const x = s.x(label.at);
      el("line", { x1: x, x2: x, y1: PAD.top, y2: height - PAD.bottom,
                   class: "label-line" }, group);
      el("text", { x: x + 3, y: height - PAD.bottom - 4, class: "label-text" }, group)
        .textContent = label.label;
    }
  }

  // Hover and arrow keys move a cursor over the readings; the readout shows
  // time, value, forecast and band of the point under it.
  function attachCursor(svg, s, points, readout, height) {
    if (!points.length) return;
    const cursor = el("g", { class: "cursor", visibility: "hidden" }, svg);
    const line = el("line", { y1: PAD.top, y2: height - PAD.bottom }, cursor);
    const dot = el("circle", { r: 4 }, cursor);
    let index = points.length - 1;
    const show = (i) => {
      index = Math.max(0, Math.min(points.length - 1, i));
      const p = points[index];
      const x = s.x(p.t);
      line.setAttribute("x1", x);
      line.setAttribute("x2", x);
      dot.setAttribute("cx", x);
      dot.setAttribute("cy", s.y(p.v));
      cursor.setAttribute("visibility", "visible");
      readout.textContent = `${formatTime(p.t)}  value ${formatNumber(p.v)}` +
          (Number.isFinite(p.f)
              ? `  forecast ${formatNumber(p.f)}  band ${formatNumber(p.lo)} … ${formatNumber(p.hi)}`
              : "  no forecast");
    };
    const nearest = (clientX) => {
      const box = svg.getBoundingClientRect();
      const viewX = ((clientX - box.left) / box.width) * svg.viewBox.baseVal.width;
      let best = 0;
      for (let i = 1; i < points.length; ++i) {
        if (Math.abs(s.x(points[i].t) - viewX) < Math.abs(s.x(points[best].t) - viewX)) best = i;
      }
      return best;
    };
    svg.addEventListener("mousemove", (e) => show(nearest(e.clientX)));
    svg.addEventListener("keydown", (e) => {
      const steps = { ArrowLeft: -1, ArrowRight: 1, PageUp: -10, PageDown: 10 };
      if (e.key in steps) { show(index + steps[e.key]); e.preventDefault(); }
      if (e.key === "Home") { show(0); e.preventDefault(); }
      if (e.key === "End") { show(points.length - 1); e.preventDefault(); }
    });
    svg.addEventListener("focus", () => show(index));
  }

  // Draws `data` into `svg` (emptied first): points [{t, v, f, lo, hi}] with
  // times in ms; alerts [{detected_at, change_at, kind, direction,
  // annotation}]; spans [{from, to, id, kind, note}]; labels [{at, label}].
  // `readout` (optional) is the element hover text goes to.
  function draw(svg, data, readout) {
    const width = 900, height = 260;
    svg.replaceChildren();
    svg.setAttribute("viewBox", `0 0 ${width} ${height}`);
    svg.setAttribute("tabindex", "0");
    svg.setAttribute("role", "img");
    const s = makeScales(data, width, height);
    drawAxes(svg, s, width, height);
    drawSpans(svg, s, data.spans || [], height);
    drawForecast(el("g", { "clip-path": addClip(svg, width, height) }, svg), s, data.points);
    drawReadings(svg, s, data.points);
    drawLabels(svg, s, data.labels || [], height);
    drawAlerts(svg, s, data.alerts || [], height);
    if (readout) attachCursor(svg, s, data.points, readout, height);
  }

  return { draw, formatTime, formatNumber };
})();
