"""/docs is the service's own API page: it works without internet access (nothing loaded from outside)."""

from __future__ import annotations

import re

from detector.service.app import STATIC_DIR


def test_docs_page_is_served_and_self_contained(client):
    r = client.get("/docs")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/html")
    assert "/static/api.js" in r.text and "/openapi.json" in r.text
    assert "Safety caution" in r.text
    assert client.get("/static/api.js").status_code == 200
    assert client.get("/redoc").status_code == 404  # FastAPI's CDN-based pages are switched off
    # no script, style sheet or image from another host in the page or the files it loads
    for name in ("api.html", "api.js", "style.css"):
        text = (STATIC_DIR / name).read_text(encoding="utf-8")
        assert not re.search(r"""(src|href)\s*=\s*["']?(https?:)?//""", text), name
        assert "import(" not in text and "@import" not in text, name


def test_openapi_document_lists_the_operations_the_page_shows(client):
    doc = client.get("/openapi.json").json()
    assert "/v1/comparisons" in doc["paths"] and "post" in doc["paths"]["/v1/comparisons"]
    assert "/docs" not in doc["paths"]  # the page itself is not an API operation


def test_web_page_writes_event_classes_as_the_cli_and_report_do():
    """The page's own label table is the one the CLI, figures and report use (detector.model.EVENT_LABELS)."""
    import json
    import re
    from pathlib import Path

    from detector.model import EVENT_LABELS

    js = (Path(__file__).resolve().parents[2] / "detector" / "service" / "static" / "app.js").read_text(encoding="utf-8")
    table = re.search(r"const EVENT_LABELS = (\{.*?\});", js)
    assert table, "app.js has no EVENT_LABELS table"
    assert json.loads(table.group(1)) == EVENT_LABELS
    assert 'replaceAll("_", " ")' not in js


def test_every_reference_in_the_api_description_resolves(client):
    """Client generators and validators follow every $ref; the JSON comparison body's RecordIn and
    ChannelIn used to point to components that were not there."""
    doc = client.get("/openapi.json").json()
    refs = set()

    def walk(node):
        if isinstance(node, dict):
            for k, v in node.items():
                if k == "$ref" and isinstance(v, str):
                    refs.add(v)
                else:
                    walk(v)
        elif isinstance(node, list):
            for v in node:
                walk(v)

    walk(doc)
    assert "#/components/schemas/RecordIn" in refs
    for ref in refs:
        assert ref.startswith("#/"), ref
        target = doc
        for part in ref[2:].split("/"):
            assert isinstance(target, dict) and part in target, f"{ref} does not resolve"
            target = target[part]
