// The clicks that measure a chart's geometry: its centre (directly, or as the centre of a ring through three or
// more clicked points), the radius of a value ring, the time-zero point, and the pen arm (the circle through
// points clicked along one printed time line: its centre is the pivot, its radius the arm length). The time-line
// clicks stay with the form (calibration-form.js sends them as the arm) until a pivot or length is typed.
import { ApiError, postJson } from "./api.js";
import { setTimeLinePoints, timeLinePoints } from "./calibration-form.js";

const fixed = (value) => String(Math.round(value * 100) / 100);

export function bindGeometryPicks({ form, picker, onChange, say }) {
  const set = (name, value) => { form.elements[name].value = fixed(value); };

  async function circleThrough(points) {
    return postJson("/api/v1/geometry/circle", { points });
  }

  function showArm(circle) {
    set("pivot_u", circle.centre[0]);
    set("pivot_v", circle.centre[1]);
    set("arm_length", circle.radius_px);
  }

  // A loaded spec whose arm is clicked points: show the pivot and length they give (unless they changed meanwhile).
  form.addEventListener("time-line-loaded", async () => {
    const kept = form.dataset.timeLinePoints;
    try {
      const circle = await circleThrough(timeLinePoints(form));
      if (form.dataset.timeLinePoints === kept) showArm(circle);
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      say(`Pen arm from the saved time-line points: ${error.message}`, "error");
    }
  });
  for (const name of ["pivot_u", "pivot_v", "arm_length"]) {
    form.elements[name].addEventListener("input", () => setTimeLinePoints(form, null));
  }

  const actions = {
    async centre() {
      const points = await picker.pickPoints({ prompt: "Click the centre of the chart.", label: "click the centre" });
      if (!points) return;
      set("centre_u", points[0][0]);
      set("centre_v", points[0][1]);
    },
    async ring() {
      const points = await picker.pickPoints({ prompt: "Click points spread around one printed ring.", minimum: 3, maximum: 60, label: "click a ring" });
      if (!points) return;
      const circle = await circleThrough(points);
      set("centre_u", circle.centre[0]);
      set("centre_v", circle.centre[1]);
      say(`Ring through ${points.length} points: centre (${fixed(circle.centre[0])}, ${fixed(circle.centre[1])}), radius ${fixed(circle.radius_px)} px, points off by ${circle.rms_px.toFixed(2)} px RMS.`);
    },
    async radius_min() { await radius("radius_min", "the lowest-value ring"); },
    async radius_max() { await radius("radius_max", "the highest-value ring"); },
    async time_zero() {
      const points = await picker.pickPoints({ prompt: "Click where the time-zero line meets the highest-value ring.", label: "click time zero" });
      if (!points) return;
      set("zero_u", points[0][0]);
      set("zero_v", points[0][1]);
    },
    async arc() {
      const points = await picker.pickPoints({ prompt: "Click points along one printed time line, end to end.", minimum: 3, maximum: 60, label: "click a time line" });
      if (!points) return;
      const circle = await circleThrough(points);
      setTimeLinePoints(form, points);
      showArm(circle);
      if (form.elements.use_arm) form.elements.use_arm.checked = true;
      say(`Pen arm: pivot (${fixed(circle.centre[0])}, ${fixed(circle.centre[1])}), length ${fixed(circle.radius_px)} px; points off the arc by ${circle.rms_px.toFixed(2)} px RMS. The ${points.length} clicks are saved as the arm; typing a pivot or length replaces them.`);
    },
  };

  async function radius(name, what) {
    const centre = [Number(form.elements.centre_u.value), Number(form.elements.centre_v.value)];
    if (form.elements.centre_u.value === "" || !centre.every(Number.isFinite)) {
      say("Give the centre first: the radius is measured from it.", "error");
      return;
    }
    const points = await picker.pickPoints({ prompt: `Click anywhere on ${what}.`, label: `click ${what}` });
    if (!points) return;
    set(name, Math.hypot(points[0][0] - centre[0], points[0][1] - centre[1]));
  }

  for (const button of form.querySelectorAll("[data-pick]")) {
    button.addEventListener("click", async () => {
      try {
        await actions[button.dataset.pick]();
        onChange();
      } catch (error) {
        if (!(error instanceof ApiError)) throw error;
        say(error.message, "error");
      }
    });
  }
  return actions;
}
