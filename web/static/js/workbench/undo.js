// Undo and redo of vertex edits, one history per trace. Snapshots are flat Float64Arrays (16 bytes a vertex), so
// a hundred steps of a 20,000-vertex trace stay near 30 MB.
const LIMIT = 100;

const pack = (vertices) => {
  const flat = new Float64Array(vertices.length * 2);
  vertices.forEach(([u, v], k) => { flat[2 * k] = u; flat[2 * k + 1] = v; });
  return flat;
};

const unpack = (flat) => {
  const vertices = new Array(flat.length / 2);
  for (let k = 0; k < vertices.length; k += 1) vertices[k] = [flat[2 * k], flat[2 * k + 1]];
  return vertices;
};

export function createHistory() {
  const histories = new Map();

  const of = (id) => {
    if (!histories.has(id)) histories.set(id, { past: [], future: [] });
    return histories.get(id);
  };

  return {
    record(id, before, after, what) {
      const history = of(id);
      history.past.push({ before: pack(before), after: pack(after), what });
      if (history.past.length > LIMIT) history.past.shift();
      history.future.length = 0;
    },
    undo(id) {
      const history = of(id);
      const step = history.past.pop();
      if (!step) return null;
      history.future.push(step);
      return { vertices: unpack(step.before), what: step.what };
    },
    redo(id) {
      const history = of(id);
      const step = history.future.pop();
      if (!step) return null;
      history.past.push(step);
      return { vertices: unpack(step.after), what: step.what };
    },
    canUndo: (id) => of(id).past.length > 0,
    canRedo: (id) => of(id).future.length > 0,
    forget: (id) => histories.delete(id),
  };
}
