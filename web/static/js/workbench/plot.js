// Small SVG plots for the side panel (residuals of a fit, a resampling preview): axes with round ticks, series
// of points or lines, optional horizontal guides and shaded x ranges. No library; a few hundred lines of SVG.
const NS = "http://www.w3.org/2000/svg";
const WIDTH = 360;
const HEIGHT = 170;
const PAD = { left: 46, right: 8, top: 8, bottom: 26 };

function el(name, attributes = {}, text) {
  const element = document.createElementNS(NS, name);
  for (const [key, value] of Object.entries(attributes)) element.setAttribute(key, String(value));
  if (text !== undefined) element.textContent = text;
  return element;
}

function ticks(low, high, count = 5) {
  if (!(high > low)) return [low];
  const raw = (high - low) / count;
  const power = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 5, 10].map((m) => m * power).find((s) => s >= raw);
  const out = [];
  for (let value = Math.ceil(low / step) * step; value <= high + step * 1e-9; value += step) out.push(Number(value.toPrecision(12)));
  return out;
}

function extent(values) {
  let low = Infinity;
  let high = -Infinity;
  for (const value of values) {
    if (value === null || !Number.isFinite(value)) continue;
    if (value < low) low = value;
    if (value > high) high = value;
  }
  if (low === Infinity) return [0, 1];
  if (low === high) return [low - 1, high + 1];
  const margin = (high - low) * 0.05;
  return [low - margin, high + margin];
}

// series: [{ x: [], y: [], kind: "points" | "line", colour }]; guides: [{ y, colour, dash }];
// shade: [{ from, to, colour, title }]; labels: { x, y }.
export function plot(container, { series, guides = [], shade = [], labels = {}, xRange, yRange }) {
  const xs = xRange || extent(series.flatMap((s) => s.x));
  const ys = yRange || extent([...series.flatMap((s) => s.y), ...guides.map((g) => g.y)]);
  const sx = (x) => PAD.left + ((x - xs[0]) / (xs[1] - xs[0])) * (WIDTH - PAD.left - PAD.right);
  const sy = (y) => HEIGHT - PAD.bottom - ((y - ys[0]) / (ys[1] - ys[0])) * (HEIGHT - PAD.top - PAD.bottom);
  const svg = el("svg", { viewBox: `0 0 ${WIDTH} ${HEIGHT}`, class: "wb-svg", "aria-hidden": "true" });
  for (const band of shade) {
    const from = Math.max(xs[0], band.from);
    const to = Math.min(xs[1], band.to);
    if (to <= from) continue;
    const rect = el("rect", { x: sx(from), y: PAD.top, width: sx(to) - sx(from), height: HEIGHT - PAD.top - PAD.bottom, fill: band.colour });
    if (band.title) rect.append(el("title", {}, band.title));
    svg.append(rect);
  }
  for (const tick of ticks(...xs)) {
    svg.append(el("line", { x1: sx(tick), x2: sx(tick), y1: PAD.top, y2: HEIGHT - PAD.bottom, class: "wb-svg-grid" }));
    svg.append(el("text", { x: sx(tick), y: HEIGHT - PAD.bottom + 13, "text-anchor": "middle", class: "wb-svg-tick" }, String(tick)));
  }
  for (const tick of ticks(...ys, 4)) {
    svg.append(el("line", { x1: PAD.left, x2: WIDTH - PAD.right, y1: sy(tick), y2: sy(tick), class: "wb-svg-grid" }));
    svg.append(el("text", { x: PAD.left - 4, y: sy(tick) + 4, "text-anchor": "end", class: "wb-svg-tick" }, String(tick)));
  }
  for (const guide of guides) {
    svg.append(el("line", { x1: PAD.left, x2: WIDTH - PAD.right, y1: sy(guide.y), y2: sy(guide.y), stroke: guide.colour, "stroke-dasharray": guide.dash || "", "stroke-width": 1 }));
  }
  for (const s of series) {
    if (s.kind === "line") {
      let d = "";
      let open = false;
      s.x.forEach((x, k) => {
        const y = s.y[k];
        if (y === null || !Number.isFinite(y)) { open = false; return; }
        d += `${open ? "L" : "M"}${sx(x).toFixed(1)},${sy(y).toFixed(1)}`;
        open = true;
      });
      svg.append(el("path", { d, fill: "none", stroke: s.colour, "stroke-width": 1.5 }));
    } else {
      const group = el("g", { fill: s.colour });
      s.x.forEach((x, k) => {
        if (s.y[k] !== null && Number.isFinite(s.y[k])) group.append(el("circle", { cx: sx(x).toFixed(1), cy: sy(s.y[k]).toFixed(1), r: 1.6 }));
      });
      svg.append(group);
    }
  }
  svg.append(el("rect", { x: PAD.left, y: PAD.top, width: WIDTH - PAD.left - PAD.right, height: HEIGHT - PAD.top - PAD.bottom, fill: "none", class: "wb-svg-frame" }));
  if (labels.x) svg.append(el("text", { x: WIDTH - PAD.right, y: HEIGHT - 2, "text-anchor": "end", class: "wb-svg-label" }, labels.x));
  if (labels.y) svg.append(el("text", { x: 4, y: PAD.top + 8, class: "wb-svg-label" }, labels.y));
  container.replaceChildren(svg);
}
