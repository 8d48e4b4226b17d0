// The control (or check) points: a table to type their values in, and the "place points" tool that adds a point
// where the scan is clicked and drags an existing one to a better spot.
const HIT_PX = 9;

function cell(row, content, className) {
  const td = document.createElement("td");
  if (className) td.className = className;
  if (content instanceof Node) td.append(content);
  else td.textContent = content;
  row.append(td);
  return td;
}

function input(name, value, label, onInput) {
  const element = document.createElement("input");
  element.name = name;
  element.value = value;
  element.size = 7;
  element.autocomplete = "off";
  element.setAttribute("aria-label", label);
  element.setAttribute("inputmode", "decimal");
  element.addEventListener("input", () => onInput(element.value));
  return element;
}

export function createPointsTable({ table, viewer, overlay, onChange, canEdit }) {
  const body = table.querySelector("tbody");
  let points = [];
  let residuals = [];
  let selected = -1;

  function render() {
    body.replaceChildren();
    points.forEach((point, index) => {
      const row = document.createElement("tr");
      row.dataset.index = String(index);
      row.classList.toggle("wb-selected-row", index === selected);
      const residual = residuals[index];
      cell(row, String(index + 1));
      cell(row, input("u", point.u.toFixed(2), `u of point ${index + 1}, px`, (text) => update(index, "u", Number(text))), "num");
      cell(row, input("v", point.v.toFixed(2), `v of point ${index + 1}, px`, (text) => update(index, "v", Number(text))), "num");
      cell(row, input("x", point.x, `x value of point ${index + 1}`, (text) => update(index, "x", text)), "num");
      cell(row, input("y", point.y, `y value of point ${index + 1}`, (text) => update(index, "y", text)), "num");
      paintOff(cell(row, "–", "num wb-off"), residual);
      const remove = document.createElement("button");
      remove.type = "button";
      remove.className = "wb-icon";
      remove.textContent = "×";
      remove.disabled = !canEdit;
      remove.setAttribute("aria-label", `Remove point ${index + 1}`);
      remove.addEventListener("click", () => removeAt(index));
      cell(row, remove);
      row.addEventListener("focusin", () => select(index));
      body.append(row);
    });
  }

  function paintOff(element, residual) {
    const known = residual && residual.distance_px !== null && residual.distance_px !== undefined;
    element.textContent = known ? residual.distance_px.toFixed(2) : "–";
    element.classList.toggle("wb-outlier", Boolean(residual && residual.outlier));
    element.title = residual && residual.outlier ? "stands out from the other points" : "";
  }

  function refreshPixel(index) {
    const row = body.rows[index];
    if (!row) return;
    row.querySelector('input[name="u"]').value = points[index].u.toFixed(2);
    row.querySelector('input[name="v"]').value = points[index].v.toFixed(2);
  }

  function update(index, key, value) {
    points[index][key] = value;
    overlay.requestDraw();
    onChange();
  }

  function select(index) {
    if (selected === index) return;
    selected = index;
    for (const row of body.rows) row.classList.toggle("wb-selected-row", Number(row.dataset.index) === index);
    overlay.requestDraw();
  }

  function removeAt(index) {
    points.splice(index, 1);
    residuals = [];
    selected = -1;
    render();
    overlay.requestDraw();
    onChange();
  }

  function hit(point) {
    let best = -1;
    let bestDistance = HIT_PX;
    points.forEach((p, index) => {
      const x = point.t.ox + point.t.ux * p.u + point.t.vx * p.v;
      const y = point.t.oy + point.t.uy * p.u + point.t.vy * p.v;
      const distance = Math.hypot(x - point.x, y - point.y);
      if (distance < bestDistance) { best = index; bestDistance = distance; }
    });
    return best;
  }

  function focusValue(index) {
    const field = body.rows[index] && body.rows[index].querySelector('input[name="x"]');
    if (field) field.focus();
  }

  let dragged = -1;
  const placeTool = {
    name: "place-points",
    label: "place control points",
    press(point) {
      dragged = hit(point);
      if (dragged >= 0) select(dragged);
      return dragged >= 0;
    },
    drag(point) {
      points[dragged].u = point.u;
      points[dragged].v = point.v;
      overlay.requestDraw();
    },
    release() {
      refreshPixel(dragged);
      dragged = -1;
      onChange();
    },
    click(point) {
      if (hit(point) >= 0) return;
      points.push({ u: point.u, v: point.v, x: "", y: "" });
      selected = points.length - 1;
      render();
      overlay.requestDraw();
      focusValue(selected);
      onChange();
    },
  };

  return {
    placeTool,
    get points() { return points; },
    get selected() { return selected; },
    // A point typed rather than clicked (keyboard use): it starts at the given pixel, usually the view's centre.
    addPoint(u, v) {
      points.push({ u, v, x: "", y: "" });
      selected = points.length - 1;
      render();
      overlay.requestDraw();
      const field = body.rows[selected] && body.rows[selected].querySelector('input[name="u"]');
      if (field) field.focus();
      onChange();
    },
    setPoints(next) { points = next; residuals = []; selected = -1; render(); overlay.requestDraw(); },
    setResiduals(next) {
      residuals = next || [];
      for (const row of body.rows) paintOff(row.querySelector(".wb-off"), residuals[Number(row.dataset.index)]);
    },
    nudge(du, dv) {
      if (selected < 0) return false;
      points[selected].u += du;
      points[selected].v += dv;
      refreshPixel(selected);
      overlay.requestDraw();
      onChange();
      return true;
    },
    removeSelected() { if (selected >= 0) { removeAt(selected); return true; } return false; },
  };
}
