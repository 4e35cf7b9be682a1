"""The API's documentation page, built from the OpenAPI document on the server itself.

No script and nothing from another site: every operation with its parameters, request body and
responses, as plain HTML (every text escaped). The machine-readable document is ``/openapi.json``.
"""

from __future__ import annotations

import html
import json
from typing import Any

DOCS_CSS = """
body { font: 15px/1.5 system-ui, sans-serif; margin: 0 auto; max-width: 60rem; padding: 1rem; color: #1b1b1b; }
h1 { font-size: 1.6rem; } h2 { font-size: 1.2rem; margin-top: 2rem; border-bottom: 1px solid #ccc; }
.op { border: 1px solid #ccc; border-radius: 4px; padding: .5rem 1rem; margin: 1rem 0; }
.method { font-weight: bold; display: inline-block; min-width: 4rem; }
code, pre { font-family: ui-monospace, monospace; font-size: .9em; }
pre { background: #f4f4f4; padding: .5rem; overflow-x: auto; white-space: pre-wrap; overflow-wrap: anywhere; }
table { border-collapse: collapse; } td, th { border: 1px solid #ddd; padding: .2rem .5rem; text-align: left; }
"""


def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _schema_text(schema: Any) -> str:
    return json.dumps(schema, indent=1, sort_keys=True)[:3000]


def docs_html(spec: dict[str, Any]) -> str:
    info = spec.get("info", {})
    parts = [f"<!doctype html><html lang='en'><head><meta charset='utf-8'><title>{_e(info.get('title', 'API'))}"
             "</title><meta name='viewport' content='width=device-width, initial-scale=1'>"
             "<link rel='stylesheet' href='/docs/docs.css'></head><body>",
             f"<h1>{_e(info.get('title', 'API'))} {_e(info.get('version', ''))}</h1>",
             f"<p>{_e(info.get('description', ''))}</p>",
             "<p>The OpenAPI document: <a href='/openapi.json'>/openapi.json</a> (generate a client from it).</p>"]
    by_tag: dict[str, list[tuple[str, str, dict[str, Any]]]] = {}
    for path, item in spec.get("paths", {}).items():
        for method, op in item.items():
            by_tag.setdefault((op.get("tags") or ["other"])[0], []).append((method, path, op))
    for tag, ops in by_tag.items():
        parts.append(f"<h2>{_e(tag)}</h2>")
        for method, path, op in ops:
            parts.append(f"<div class='op'><p><span class='method'>{_e(method.upper())}</span> <code>{_e(path)}</code>"
                         f"</p><p>{_e(op.get('description') or op.get('summary') or '')}</p>")
            params = op.get("parameters", [])
            if params:
                parts.append("<table><tr><th>parameter</th><th>in</th><th>required</th><th>schema</th></tr>")
                for p in params:
                    parts.append(f"<tr><td><code>{_e(p.get('name'))}</code></td><td>{_e(p.get('in'))}</td>"
                                 f"<td>{_e(p.get('required', False))}</td>"
                                 f"<td><code>{_e(json.dumps(p.get('schema', {})))}</code></td></tr>")
                parts.append("</table>")
            body = op.get("requestBody", {}).get("content", {})
            for media, content in body.items():
                parts.append(f"<p>Request body ({_e(media)}):</p><pre>{_e(_schema_text(content.get('schema')))}</pre>")
            responses = op.get("responses", {}).items()
            codes = ", ".join(f"{_e(code)} {_e(r.get('description', ''))}" for code, r in responses)
            parts.append(f"<p>Responses: {codes}</p></div>")
    parts.append("<h2>Schemas</h2>")
    for name, schema in spec.get("components", {}).get("schemas", {}).items():
        parts.append(f"<h3 id='{_e(name)}'>{_e(name)}</h3><pre>{_e(_schema_text(schema))}</pre>")
    parts.append("</body></html>")
    return "".join(parts)
