// Picking the pen colour from the scan itself: click the pen line and the server reads the normalised sheet (not
// the compressed display tiles) around the click, returning the ink's colour rather than the paper's.
import { ApiError, getJson, query } from "./api.js";

const RADIUS_PX = 3;

export function createColourPicker({ sheetId, picker }) {
  return {
    async pick() {
      const points = await picker.pickPoints({ prompt: "Click on the pen line whose colour to use.", label: "pick the pen colour" });
      if (!points) return null;
      const [u, v] = points[0];
      try {
        return await getJson(`/api/v1/sheets/${sheetId}/colour?${query({ u, v, radius: RADIUS_PX })}`);
      } catch (error) {
        if (!(error instanceof ApiError)) throw error;
        return { error: error.message };
      }
    },
  };
}
