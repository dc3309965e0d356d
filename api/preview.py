"""GET /preview: a plain HTML page (no build step) for checking related lists before rollout.

The page asks for a token (kept in the browser's sessionStorage), a page (with suggestions from
``GET /v1/pages``) and a viewer, and shows the related list with each item's reason. It calls
the same API as any client; the page itself holds no data.
"""

from __future__ import annotations

from pathlib import Path

from fastapi import APIRouter
from fastapi.responses import HTMLResponse

PAGE = Path(__file__).parent / "static" / "preview.html"

router = APIRouter()


@router.get("/preview", response_class=HTMLResponse, include_in_schema=False)
def preview() -> HTMLResponse:
    return HTMLResponse(PAGE.read_text(encoding="utf-8"))
