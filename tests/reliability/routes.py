"""Every route the app serves, read from ``app.routes`` (so a new route is seen without anyone listing it), and
concrete URLs for them with real ids of the campaign's records."""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass

from fastapi import FastAPI

SAFE = frozenset({"GET", "HEAD", "OPTIONS"})
PARAM = re.compile(r"\{([a-zA-Z_][a-zA-Z0-9_]*)(?::[a-z]+)?\}")


@dataclass(frozen=True)
class RouteInfo:
    method: str  # "MOUNT" for mounted apps (static files)
    path: str
    name: str

    @property
    def key(self) -> tuple[str, str]:
        return self.method, self.path

    @property
    def params(self) -> list[str]:
        return PARAM.findall(self.path)

    @property
    def is_api(self) -> bool:
        return self.path.startswith("/api/")


def _flatten(routes: list[object]) -> list[object]:
    flat: list[object] = []
    for route in routes:
        contexts = getattr(route, "effective_route_contexts", None)
        flat.extend(contexts() if callable(contexts) else [route])
    return flat


def app_routes(app: FastAPI) -> list[RouteInfo]:
    """One entry per (method, path) the app answers, HEAD folded into GET."""
    found: dict[tuple[str, str], RouteInfo] = {}
    for route in _flatten(list(app.routes)):
        path = str(getattr(route, "path", ""))
        endpoint = getattr(route, "endpoint", None)
        name = getattr(endpoint, "__name__", "") or str(getattr(route, "name", ""))
        methods = getattr(route, "methods", None)
        for method in sorted(set(methods or {"MOUNT"}) - {"HEAD"}):
            found[(method, path)] = RouteInfo(method, path, name)
    return sorted(found.values(), key=lambda info: (info.path, info.method))


def concrete_url(route: RouteInfo, values: Mapping[str, object]) -> str:
    """The route's path with every parameter replaced by ``values[name]`` (KeyError names a missing one)."""

    def replace(match: re.Match[str]) -> str:
        name = match.group(1)
        if name not in values:
            raise KeyError(f"{route.method} {route.path}: no test value for path parameter {name!r}")
        return str(values[name])

    return PARAM.sub(replace, route.path)
