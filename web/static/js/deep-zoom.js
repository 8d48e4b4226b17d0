// The deep-zoom viewer of a sheet (vendored OpenSeadragon reading the DZI pyramid).
for (const element of document.querySelectorAll("[data-deep-zoom]")) {
  const viewer = window.OpenSeadragon({
    element,
    prefixUrl: "/static/vendor/openseadragon/images/",
    tileSources: element.dataset.tiles,
    showNavigator: true,
    navigatorPosition: "BOTTOM_RIGHT",
    maxZoomPixelRatio: 4,
    gestureSettingsMouse: { clickToZoom: false },
    crossOriginPolicy: false,
  });
  element.tracedeskViewer = viewer;
  viewer.addHandler("open", () => element.setAttribute("data-ready", "true"));
}
