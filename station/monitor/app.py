"""The monitor: a small web application that shows runs from their folders, live.

Why its own process, reading files: a run needs no monitor, and a monitor that crashes or is
restarted can never disturb a run. The page is server-rendered HTML with one small script that
listens to server-sent events (one stream per run) and updates the page; the chart library is
the plotly.js file shipped inside the `plotly` package, served as a static file (no front-end
build step, no network).

Access: on loopback the page is open; with a token set, every control needs it, and when bound
to any other address the token is required for everything (it is sent in a header or a cookie
set by a form post, never in a URL, so it does not end up in access logs).
"""

from __future__ import annotations

import asyncio
import hmac
import json
import time
import urllib.parse
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

from jinja2 import Environment, PackageLoader, select_autoescape
from starlette.applications import Starlette
from starlette.requests import Request
from starlette.responses import (FileResponse, HTMLResponse, JSONResponse, RedirectResponse,
                                 Response, StreamingResponse)
from starlette.routing import Route

from station.monitor.folders import (EventTail, find_runs, latest_capture, progress_of,
                                     results_of, iter_capture_images)
from station.monitor.preview import preview_png
from station.formatting import reading_lines
from station.record.live import ACTIONS, post_request, read_status

__all__ = ["MonitorSettings", "build_app"]

POLL_S = 0.25
TOKEN_HEADER = "x-nightbench-token"
TOKEN_COOKIE = "nightbench_token"


@dataclass(frozen=True)
class MonitorSettings:
    """What `nightbench monitor` was asked to serve, and how."""

    root: Path
    token: str | None = None
    read_only: bool = False
    loopback: bool = True


def _plotly_js() -> Path | None:
    try:
        import plotly  # noqa: F401  (only its shipped static file is used)
    except ImportError:
        return None
    path = Path(str(resources.files("plotly"))) / "package_data" / "plotly.min.js"
    return path if path.is_file() else None


def build_app(settings: MonitorSettings) -> Starlette:
    """The ASGI application for one run folder or a folder of runs."""
    env = Environment(loader=PackageLoader("station.monitor", "templates"),
                      autoescape=select_autoescape(["html"]))
    previews: dict[tuple[str, float], bytes] = {}

    def token_ok(request: Request) -> bool:
        if not settings.token:
            return True
        given = request.headers.get(TOKEN_HEADER) or request.cookies.get(TOKEN_COOKIE) or ""
        return hmac.compare_digest(given.encode(), settings.token.encode())

    def viewing_allowed(request: Request) -> bool:
        return settings.loopback or token_ok(request)

    def run_path(name: str) -> Path | None:
        root = settings.root.resolve()
        if (root / "manifest.json").is_file() or (root / "run-folder.json").is_file():
            return root if name == root.name else None
        candidate = (root / name).resolve()
        if candidate.parent != root or not candidate.is_dir():
            return None  # never serve anything outside the folder of runs
        return candidate

    def login_page(request: Request, message: str = "") -> HTMLResponse:
        return HTMLResponse(env.get_template("login.html").render(message=message), status_code=401)

    async def index(request: Request) -> Response:
        if not viewing_allowed(request):
            return login_page(request)
        runs = find_runs(settings.root)
        if len(runs) == 1 and runs[0].path.resolve() == settings.root.resolve():
            return RedirectResponse(f"/runs/{runs[0].name}", status_code=303)
        return HTMLResponse(env.get_template("runs.html").render(runs=runs, root=settings.root))

    async def login(request: Request) -> Response:
        form = urllib.parse.parse_qs((await request.body()).decode("utf-8", "replace"))
        given = (form.get("token") or [""])[0]
        if not settings.token or not hmac.compare_digest(given.encode(), settings.token.encode()):
            return login_page(request, "wrong token")
        response = RedirectResponse("/", status_code=303)
        response.set_cookie(TOKEN_COOKIE, given, httponly=True, samesite="strict")
        return response

    async def run_page(request: Request) -> Response:
        if not viewing_allowed(request):
            return login_page(request)
        path = run_path(request.path_params["name"])
        if path is None:
            return HTMLResponse("no such run", status_code=404)
        return HTMLResponse(env.get_template("run.html").render(
            name=path.name, controls=not settings.read_only, token_needed=bool(settings.token),
            have_chart=_plotly_js() is not None))

    async def run_json(request: Request) -> Response:
        if not viewing_allowed(request):
            return JSONResponse({"error": "token required"}, status_code=401)
        path = run_path(request.path_params["name"])
        if path is None:
            return JSONResponse({"error": "no such run"}, status_code=404)
        return JSONResponse(_snapshot(path))

    async def stream(request: Request) -> Response:
        if not viewing_allowed(request):
            return JSONResponse({"error": "token required"}, status_code=401)
        path = run_path(request.path_params["name"])
        if path is None:
            return JSONResponse({"error": "no such run"}, status_code=404)

        async def events() -> Any:
            tail = EventTail(path / "events.jsonl")
            backlog = tail.read(limit=60)
            last_status = last_results = last_preview = None
            yield _sse("events", backlog)
            while True:
                if await request.is_disconnected():
                    return
                snap = _snapshot(path)
                if snap["status"] != last_status:
                    last_status = snap["status"]
                    yield _sse("status", {"status": snap["status"], "progress": snap["progress"],
                                          "state": snap["state"],
                                          "reading_lines": snap["reading_lines"]})
                new = tail.read(limit=200)
                if new:
                    yield _sse("events", new)
                if snap["results"] != last_results:
                    last_results = snap["results"]
                    yield _sse("results", snap["results"])
                if snap["preview"] != last_preview:
                    last_preview = snap["preview"]
                    yield _sse("preview", {"version": snap["preview"]})
                yield ": keep-alive\n\n"
                await asyncio.sleep(POLL_S)

        return StreamingResponse(events(), media_type="text/event-stream",
                                 headers={"Cache-Control": "no-store"})

    async def preview(request: Request) -> Response:
        if not viewing_allowed(request):
            return Response(status_code=401)
        path = run_path(request.path_params["name"])
        found = latest_capture(path) if path is not None else None
        if found is None:
            return Response(status_code=404)
        meta_path, meta = found
        target = str((meta.get("extra") or {}).get("target") or "")
        for image in iter_capture_images(meta_path, meta):
            try:
                key = (str(image), image.stat().st_mtime)
            except OSError:
                continue
            if key not in previews:
                try:
                    previews.clear()
                    previews[key] = preview_png(image, target)
                except (OSError, ValueError):
                    continue
            return Response(previews[key], media_type="image/png",
                            headers={"Cache-Control": "no-store"})
        return Response(status_code=404)

    async def control(request: Request) -> Response:
        if settings.read_only:
            return JSONResponse({"error": "this monitor is read-only"}, status_code=403)
        if not token_ok(request):
            return JSONResponse({"error": "token required for controls"}, status_code=403)
        path = run_path(request.path_params["name"])
        action = request.path_params["action"]
        if path is None or action not in ACTIONS:
            return JSONResponse({"error": "no such run or action"}, status_code=404)
        status = read_status(path) or {}
        if status.get("state") in (None, "complete", "aborted", "faulted"):
            return JSONResponse({"error": f"the run is not running ({status.get('state')})"},
                                status_code=409)
        client = request.client.host if request.client else "unknown"
        post_request(path, action, f"monitor (browser at {client})")
        return JSONResponse({"ok": True, "action": action})

    async def plotly_js(request: Request) -> Response:
        js = _plotly_js()
        if js is None:
            return Response("plotly is not installed", status_code=404)
        return FileResponse(js, media_type="application/javascript")

    async def static(request: Request) -> Response:
        name = request.path_params["name"]
        if name not in ("monitor.js", "monitor.css"):
            return Response(status_code=404)
        file = Path(str(resources.files("station.monitor"))) / "static" / name
        kind = "application/javascript" if name.endswith(".js") else "text/css"
        return FileResponse(file, media_type=kind)

    return Starlette(routes=[
        Route("/", index), Route("/login", login, methods=["POST"]),
        Route("/runs/{name}", run_page), Route("/api/runs/{name}", run_json),
        Route("/api/runs/{name}/stream", stream),
        Route("/api/runs/{name}/preview.png", preview),
        Route("/api/runs/{name}/control/{action}", control, methods=["POST"]),
        Route("/static/plotly.min.js", plotly_js), Route("/static/{name}", static),
    ])


def _sse(kind: str, data: Any) -> str:
    return f"event: {kind}\ndata: {json.dumps(data, default=str)}\n\n"


def _snapshot(path: Path) -> dict[str, Any]:
    status = read_status(path) or {}
    manifest_state = None
    try:
        manifest_state = json.loads((path / "manifest.json").read_text()).get("state")
    except (OSError, ValueError):
        pass
    state = manifest_state if manifest_state in ("complete", "aborted", "faulted") else \
        status.get("state", "unknown")
    found = latest_capture(path)
    preview = None
    if found is not None:
        try:
            preview = f"{found[0].name}:{found[0].stat().st_mtime}"
        except OSError:
            preview = None
    readings = status.get("readings") or {}
    lines = reading_lines(readings) if isinstance(readings, dict) else []
    return {"name": path.name, "state": state, "status": status, "reading_lines": lines,
            "progress": progress_of({**status, "state": state}) if status else {},
            "results": results_of(path), "preview": preview, "served_at": time.time()}
