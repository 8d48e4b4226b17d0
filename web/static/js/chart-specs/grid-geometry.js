// The printed-grid form <-> a chart spec's geometry (the JSON shapes of server/tracedesk/science/grid_spec.py).
// The form only gathers what was typed: the server checks it and names the field of any mistake, so a number
// that does not parse is passed on as typed and the server's message says which field it was.
const CARTESIAN_AXES = { x_axis: true, y_axis: true };
const CIRCULAR_OPTIONAL = ["time_line_hours", "time_major_hours", "time_zero_angle_deg"];

const field = (form, name) => form.elements.namedItem(name);
const text = (form, name) => field(form, name).value.trim();

// A number, the text as typed when it is not one, or undefined when the field is empty.
function numberOf(form, name) {
  const typed = text(form, name);
  if (typed === "") return undefined;
  const value = Number(typed);
  return Number.isFinite(value) ? value : typed;
}

function listOf(form, name, parse) {
  const typed = text(form, name);
  if (typed === "") return undefined;
  return typed.split(/[,;\s]+/).filter(Boolean).map(parse);
}

const mantissa = (item) => (Number.isFinite(Number(item)) ? Number(item) : item);

function setIfGiven(target, key, value) {
  if (value !== undefined && value !== "") target[key] = value;
}

// Number inputs whose text the browser could not read as a number (their value is "" then).
export function unreadableNumbers(form) {
  return [...form.querySelectorAll('input[type="number"]')].filter((input) => input.validity.badInput && !input.closest("[hidden]"));
}

function axisFromForm(form, path, base) {
  const scale = text(form, `${path}.scale`);
  const frame = [numberOf(form, `${path}.frame[0]`) ?? null, numberOf(form, `${path}.frame[1]`) ?? null];
  const axis = { scale, frame };
  if (scale === "log10") {
    setIfGiven(axis, "decade_lines", listOf(form, `${path}.decade_lines`, mantissa));
    setIfGiven(axis, "decade_major", listOf(form, `${path}.decade_major`, mantissa));
  } else {
    setIfGiven(axis, "minor_step", numberOf(form, `${path}.minor_step`));
    setIfGiven(axis, "major_step", numberOf(form, `${path}.major_step`));
  }
  if (CARTESIAN_AXES[path]) setIfGiven(axis, "increases", text(form, `${path}.increases`));
  // A time axis' start is not on the form (it belongs to each sheet) but an existing one is kept.
  if (scale === "time" && base && base.start) axis.start = base.start;
  return axis;
}

function coloursFromForm(form, geometry) {
  geometry.grid_colour = text(form, "grid_colour");
  setIfGiven(geometry, "pen_colours", listOf(form, "pen_colours", (item) => item));
  setIfGiven(geometry, "colour_tolerance", numberOf(form, "colour_tolerance"));
  return geometry;
}

function circularFromForm(form, base) {
  const geometry = {
    kind: "circular",
    value_axis: axisFromForm(form, "value_axis", base.value_axis),
    ring_radii_mm: [numberOf(form, "ring_radii_mm[0]") ?? null, numberOf(form, "ring_radii_mm[1]") ?? null],
    period_hours: numberOf(form, "period_hours") ?? null,
    time_lines: text(form, "time_lines"),
  };
  for (const name of CIRCULAR_OPTIONAL) setIfGiven(geometry, name, numberOf(form, name));
  if (geometry.time_lines === "arcs") {
    setIfGiven(geometry, "arc_radius_mm", numberOf(form, "arc_radius_mm"));
    setIfGiven(geometry, "pivot_distance_mm", numberOf(form, "pivot_distance_mm"));
  }
  setIfGiven(geometry, "time_direction", text(form, "time_direction"));
  return coloursFromForm(form, geometry);
}

// The geometry the form describes; ``base`` is the spec's stored geometry (or {}), for what the form does not show.
export function geometryFromForm(form, base = {}) {
  if (text(form, "kind") === "circular") return circularFromForm(form, base.kind === "circular" ? base : {});
  const same = base.kind === "cartesian" ? base : {};
  const geometry = {
    kind: "cartesian",
    x_axis: axisFromForm(form, "x_axis", same.x_axis),
    y_axis: axisFromForm(form, "y_axis", same.y_axis),
  };
  return coloursFromForm(form, geometry);
}

function put(form, name, value) {
  const input = field(form, name);
  if (input) input.value = value === undefined || value === null ? "" : Array.isArray(value) ? value.join(", ") : String(value);
}

function fillAxis(form, path, axis = {}) {
  put(form, `${path}.scale`, axis.scale || field(form, `${path}.scale`).options[0].value);
  put(form, `${path}.frame[0]`, axis.frame && axis.frame[0]);
  put(form, `${path}.frame[1]`, axis.frame && axis.frame[1]);
  for (const name of ["minor_step", "major_step", "decade_lines", "decade_major"]) put(form, `${path}.${name}`, axis[name]);
  if (CARTESIAN_AXES[path]) put(form, `${path}.increases`, axis.increases || "");
}

// Put a stored geometry into the form (an empty object clears it, keeping the chosen kind).
export function fillForm(form, geometry) {
  const kind = geometry.kind || text(form, "kind") || "cartesian";
  put(form, "kind", kind);
  for (const path of ["x_axis", "y_axis", "value_axis"]) fillAxis(form, path, geometry[path]);
  const radii = geometry.ring_radii_mm || [];
  put(form, "ring_radii_mm[0]", radii[0]);
  put(form, "ring_radii_mm[1]", radii[1]);
  for (const name of ["period_hours", "arc_radius_mm", "pivot_distance_mm", ...CIRCULAR_OPTIONAL]) put(form, name, geometry[name]);
  put(form, "time_lines", geometry.time_lines || "radial");
  put(form, "time_direction", geometry.time_direction || "");
  put(form, "grid_colour", geometry.grid_colour);
  put(form, "pen_colours", geometry.pen_colours);
  put(form, "colour_tolerance", geometry.colour_tolerance);
}
