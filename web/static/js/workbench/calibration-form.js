// The calibration form <-> the calibration JSON the API takes (documented in science/calibration.py).
// specFromForm answers { spec } when the draft is complete enough to fit, or { missing } saying what is missing,
// so the page never sends a draft the server would refuse for an obvious reason.

const number = (text) => (text === "" || text === null || text === undefined ? NaN : Number(text));
const isNumber = (value) => Number.isFinite(value);

function pointValue(text, { timeWithStart }) {
  const trimmed = String(text ?? "").trim();
  if (trimmed === "") return null;
  const value = Number(trimmed);
  if (Number.isFinite(value)) return value;
  return timeWithStart && /^\d{4}-\d{2}-\d{2}T/.test(trimmed) ? trimmed : null;
}

function scaleProblem(scale, value, axis) {
  if (typeof value !== "number") return null;
  if (scale === "log10" && value <= 0) return `${axis} values on a logarithmic scale must be above zero`;
  if (scale === "sqrt" && value < 0) return `${axis} values on a square-root scale cannot be negative`;
  return null;
}

function completePoints(points, scales, options) {
  const out = [];
  for (const point of points) {
    const x = pointValue(point.x, options);
    const y = pointValue(point.y, { timeWithStart: false });
    if (x === null || y === null || !isNumber(point.u) || !isNumber(point.v)) continue;
    const problem = scaleProblem(scales[0], x, "x") || scaleProblem(scales[1], y, "y");
    if (problem) return { problem };
    out.push({ pixel: [point.u, point.v], value: [x, y] });
  }
  return { points: out };
}

// The pixels clicked along one time line, kept with the form while the pen arm comes from them: the spec then
// carries the clicks (pen_arc.time_line_points), so the server fits the arm and counts their click uncertainty.
// Typing a pivot or length drops them (a typed arm is taken as exact).
export function setTimeLinePoints(form, points) {
  if (Array.isArray(points) && points.length) form.dataset.timeLinePoints = JSON.stringify(points);
  else delete form.dataset.timeLinePoints;
}

export function timeLinePoints(form) {
  const text = form.dataset.timeLinePoints;
  return text ? JSON.parse(text) : null;
}

function penArc(form, withSide) {
  const clicked = timeLinePoints(form);
  const pivot = [number(form.pivot_u.value), number(form.pivot_v.value)];
  const length = number(form.arm_length.value);
  if (!clicked && (!pivot.every(isNumber) || !(length > 0))) return null;
  const arc = clicked ? { time_line_points: clicked } : { pivot_pixel: pivot, length_px: length };
  if (withSide) arc.pivot_side = form.pivot_side.value;
  return arc;
}

function gridSpec(form, points) {
  const kind = form.kind.value;
  const start = form.start.value.trim();
  const xAxis = { scale: form.x_scale.value };
  if (form.x_unit.value.trim() && xAxis.scale !== "time") xAxis.unit = form.x_unit.value.trim();
  if (start && xAxis.scale === "time") xAxis.start = start;
  const yAxis = { scale: form.y_scale.value };
  if (form.y_unit.value.trim()) yAxis.unit = form.y_unit.value.trim();
  const found = completePoints(points, [xAxis.scale, yAxis.scale], { timeWithStart: Boolean(xAxis.start) });
  if (found.problem) return { missing: found.problem };
  if (found.points.length < 2) return { missing: "place at least two control points and type their values" };
  const spec = { kind, x_axis: xAxis, y_axis: yAxis, control_points: found.points, transform: form.transform.value };
  if (kind === "curvilinear") {
    const arc = penArc(form, true);
    if (!arc) return { missing: "give the pen arm: click points on one time line, or type pivot and length" };
    spec.pen_arc = arc;
  }
  return { spec };
}

function circularSpec(form, points) {
  const centre = [number(form.centre_u.value), number(form.centre_v.value)];
  const zero = [number(form.zero_u.value), number(form.zero_v.value)];
  const axis = {
    scale: form.value_scale.value,
    min: number(form.value_min.value),
    max: number(form.value_max.value),
    radius_min_px: number(form.radius_min.value),
    radius_max_px: number(form.radius_max.value),
  };
  const period = number(form.period_hours.value);
  if (!centre.every(isNumber)) return { missing: "give the centre" };
  if (![axis.min, axis.max, axis.radius_min_px, axis.radius_max_px].every(isNumber)) {
    return { missing: "give the lowest and highest values and the radii of their rings" };
  }
  if (!(axis.min < axis.max)) return { missing: "the lowest value must be below the highest" };
  if (!(period > 0)) return { missing: "give the hours per turn" };
  if (!zero.every(isNumber)) return { missing: "click where time zero meets the highest-value ring" };
  if (form.value_unit.value.trim()) axis.unit = form.value_unit.value.trim();
  const spec = { kind: "circular", centre, value_axis: axis, period_hours: period, time_zero_pixel: zero,
    time_direction: form.time_direction.value };
  if (form.use_arm.checked) {
    const arc = penArc(form, false);
    if (!arc) return { missing: "give the pen arm, or untick 'time lines are arcs'" };
    spec.pen_arc = arc;
  }
  const start = form.start.value.trim();
  if (start) spec.start = start;
  const found = completePoints(points, ["time", axis.scale], { timeWithStart: Boolean(start) });
  if (found.problem) return { missing: found.problem };
  if (found.points.length) spec.check_points = found.points;
  return { spec };
}

export function specFromForm(form, points) {
  return form.kind.value === "circular" ? circularSpec(form, points) : gridSpec(form, points);
}

const setValue = (input, value) => { input.value = value === undefined || value === null ? "" : String(value); };

// A typed arm fills pivot and length; a clicked one keeps its points, and the "time-line-loaded" event asks
// the geometry picks (calibration-geometry.js) to show the pivot and length of the circle through them.
function fillArc(form, arc) {
  const clicked = arc && Array.isArray(arc.time_line_points) ? arc.time_line_points : null;
  const pivot = arc && !clicked && Array.isArray(arc.pivot_pixel) ? arc.pivot_pixel : [];
  setTimeLinePoints(form, clicked);
  setValue(form.pivot_u, pivot[0]);
  setValue(form.pivot_v, pivot[1]);
  setValue(form.arm_length, arc && !clicked ? arc.length_px : "");
  if (arc && arc.pivot_side) form.pivot_side.value = arc.pivot_side;
  if (clicked) form.dispatchEvent(new CustomEvent("time-line-loaded"));
}

// Fill the form from a saved spec; returns its points as { u, v, x, y } rows.
export function formFromSpec(form, spec) {
  form.kind.value = spec.kind === "circular" || spec.kind === "curvilinear" ? spec.kind : "cartesian";
  if (spec.kind === "circular") {
    const axis = spec.value_axis || {};
    setValue(form.centre_u, spec.centre && spec.centre[0]);
    setValue(form.centre_v, spec.centre && spec.centre[1]);
    form.value_scale.value = axis.scale || "linear";
    setValue(form.value_unit, axis.unit);
    setValue(form.value_min, axis.min);
    setValue(form.value_max, axis.max);
    setValue(form.radius_min, axis.radius_min_px);
    setValue(form.radius_max, axis.radius_max_px);
    setValue(form.period_hours, spec.period_hours);
    form.time_direction.value = spec.time_direction || "clockwise";
    setValue(form.zero_u, spec.time_zero_pixel && spec.time_zero_pixel[0]);
    setValue(form.zero_v, spec.time_zero_pixel && spec.time_zero_pixel[1]);
    form.use_arm.checked = Boolean(spec.pen_arc);
    fillArc(form, spec.pen_arc);
    setValue(form.start, spec.start);
  } else {
    const xAxis = spec.x_axis || {};
    const yAxis = spec.y_axis || {};
    form.x_scale.value = xAxis.scale || "linear";
    setValue(form.x_unit, xAxis.unit);
    form.y_scale.value = yAxis.scale || "linear";
    setValue(form.y_unit, yAxis.unit);
    form.transform.value = spec.transform || "auto";
    setValue(form.start, xAxis.start);
    fillArc(form, spec.pen_arc);
  }
  const points = spec.control_points || spec.check_points || [];
  return points.map((p) => ({ u: p.pixel[0], v: p.pixel[1], x: String(p.value[0]), y: String(p.value[1]) }));
}

// The geometry the overlay shows while a circular or arc calibration is drafted.
export function draftGeometry(form) {
  const centre = [number(form.centre_u.value), number(form.centre_v.value)];
  const pivot = [number(form.pivot_u.value), number(form.pivot_v.value)];
  const zero = [number(form.zero_u.value), number(form.zero_v.value)];
  const circular = form.kind.value === "circular";
  return {
    kind: form.kind.value,
    centre: circular && centre.every(isNumber) ? centre : null,
    radii: circular ? [number(form.radius_min.value), number(form.radius_max.value)].filter((r) => r > 0) : [],
    zero: circular && zero.every(isNumber) ? zero : null,
    pivot: pivot.every(isNumber) && (form.kind.value === "curvilinear" || form.use_arm.checked) ? pivot : null,
    arm: number(form.arm_length.value),
  };
}
