// Chart specs <-> calibration drafts (shapes: science/grid_spec.py for a spec's printed geometry,
// science/calibration.py for a calibration). A spec fills the draft with what belongs to the printed chart
// (kind, scales, units, mapping model, pen arm, and the points of a calibration saved as a spec); what belongs
// to one sheet (the chart start) is never taken from a spec nor saved into one.

export const KIND_WORDS = {
  cartesian: "grid chart",
  circular: "circular chart",
  curvilinear: "strip chart with pen arcs",
  strip_speed: "strip chart timed by chart speed",
};
// Kinds the Calibrate form can show; a strip_speed calibration is set up through the API only.
export const FORM_KINDS = new Set(["cartesian", "circular", "curvilinear"]);

function withUnit(axis, unit) {
  const out = { ...axis };
  if (!out.unit && unit) out.unit = unit;
  return out;
}

// The draft a printed geometry implies: kind and axis scales (a circular chart's value range and period too),
// and whether its time lines are pen arcs. ``current`` holds what the form has now ({ xUnit, yUnit, valueUnit,
// transform }), kept where the geometry is silent (a printed grid has no units).
export function draftFromGeometry(geometry, current) {
  if (geometry.kind === "circular") {
    const axis = geometry.value_axis || {};
    const frame = axis.frame || [];
    const spec = {
      kind: "circular",
      value_axis: withUnit({ scale: axis.scale || "linear", min: frame[0], max: frame[1] }, current.valueUnit),
      period_hours: geometry.period_hours,
    };
    if (geometry.time_direction) spec.time_direction = geometry.time_direction;
    // The arm's length is printed in mm; its pixels come from clicking a time line on this scan.
    return { spec, armArcs: geometry.time_lines === "arcs" };
  }
  const x = geometry.x_axis || {};
  const y = geometry.y_axis || {};
  const spec = {
    kind: "cartesian",
    x_axis: withUnit({ scale: x.scale || "linear" }, x.scale === "time" ? "" : current.xUnit),
    y_axis: withUnit({ scale: y.scale || "linear" }, current.yUnit),
    transform: current.transform || "auto",
  };
  return { spec, armArcs: false };
}

// The calibration a detection proposes, with the units and model the form already has (detection knows the
// printed lines, not what they measure).
export function draftFromDetection(detection, current) {
  const spec = detection.calibration;
  if (spec.kind === "circular") return { ...spec, value_axis: withUnit(spec.value_axis || {}, current.valueUnit) };
  return {
    ...spec,
    x_axis: withUnit(spec.x_axis || {}, spec.x_axis && spec.x_axis.scale === "time" ? "" : current.xUnit),
    y_axis: withUnit(spec.y_axis || {}, current.yUnit),
    transform: current.transform || spec.transform || "auto",
  };
}

// A calibration as a reusable template: everything but the chart start, which belongs to one sheet.
export function templateFromDraft(spec) {
  const template = JSON.parse(JSON.stringify(spec));
  delete template.start;
  delete template.reason;
  if (template.x_axis) delete template.x_axis.start;
  return template;
}

// One line describing a spec for the panel's note.
export function describeSpec(option) {
  if (!option || !option.value) return "";
  const parts = [];
  if (option.dataset.template === "true") parts.push("a saved calibration (kind, scales, units and points)");
  if (option.dataset.geometry === "true") parts.push("its printed grid, which can be looked for on this scan");
  const kind = KIND_WORDS[option.dataset.kind] || option.dataset.kind;
  return `“${option.dataset.name}” is a ${kind} spec holding ${parts.join(" and ")}.`;
}
