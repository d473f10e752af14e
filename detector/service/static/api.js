// Renders /openapi.json as a plain list of operations (no outside resources, no HTML from the document).
"use strict";

function el(tag, text, cls) {
  const e = document.createElement(tag);
  if (text !== undefined && text !== null) e.textContent = String(text);
  if (cls) e.className = cls;
  return e;
}

function resolve(doc, schema) {
  // follow one local "$ref" ("#/components/schemas/Name") to show a schema's name and fields
  if (schema && schema.$ref && schema.$ref.startsWith("#/")) {
    const parts = schema.$ref.slice(2).split("/");
    let node = doc;
    for (const p of parts) node = node ? node[p] : undefined;
    return { name: parts[parts.length - 1], schema: node || {} };
  }
  return { name: schema && schema.type ? schema.type : "", schema: schema || {} };
}

function fieldsTable(doc, schema) {
  const { schema: s } = resolve(doc, schema);
  const props = s.properties || {};
  const names = Object.keys(props);
  if (!names.length) return null;
  const required = new Set(s.required || []);
  const table = el("table");
  const head = el("tr");
  for (const h of ["field", "type", "required", "description"]) head.appendChild(el("th", h));
  table.appendChild(head);
  for (const n of names) {
    const p = props[n];
    const r = resolve(doc, p);
    const tr = el("tr");
    tr.appendChild(el("td", n));
    tr.appendChild(el("td", p.type || r.name || (p.anyOf ? p.anyOf.map((a) => a.type || resolve(doc, a).name).join(" | ") : "")));
    tr.appendChild(el("td", required.has(n) ? "yes" : ""));
    tr.appendChild(el("td", p.description || ""));
    table.appendChild(tr);
  }
  return table;
}

function operation(doc, path, method, op, index) {
  const sec = el("section");
  sec.id = "op" + index;
  sec.appendChild(el("h2", method.toUpperCase() + " " + path));
  if (op.summary) sec.appendChild(el("p", op.summary));
  if (op.description && op.description !== op.summary) sec.appendChild(el("p", op.description, "sub"));
  const params = op.parameters || [];
  if (params.length) {
    sec.appendChild(el("h3", "Parameters"));
    const table = el("table");
    const head = el("tr");
    for (const h of ["name", "in", "type", "required", "description"]) head.appendChild(el("th", h));
    table.appendChild(head);
    for (const p of params) {
      const tr = el("tr");
      tr.appendChild(el("td", p.name));
      tr.appendChild(el("td", p.in));
      tr.appendChild(el("td", p.schema ? (p.schema.type || resolve(doc, p.schema).name) : ""));
      tr.appendChild(el("td", p.required ? "yes" : ""));
      tr.appendChild(el("td", p.description || ""));
      table.appendChild(tr);
    }
    sec.appendChild(table);
  }
  const body = op.requestBody && op.requestBody.content;
  if (body) {
    sec.appendChild(el("h3", "Request body"));
    for (const [ctype, media] of Object.entries(body)) {
      sec.appendChild(el("p", ctype, "sub"));
      const t = media.schema ? fieldsTable(doc, media.schema) : null;
      if (t) sec.appendChild(t);
    }
  }
  const responses = op.responses || {};
  const codes = Object.keys(responses);
  if (codes.length) {
    sec.appendChild(el("h3", "Responses"));
    const ul = el("ul");
    for (const c of codes) ul.appendChild(el("li", c + ": " + (responses[c].description || "")));
    sec.appendChild(ul);
  }
  return sec;
}

async function main() {
  const out = document.getElementById("operations");
  const toc = document.getElementById("toc");
  let doc;
  try {
    const r = await fetch("/openapi.json");
    if (!r.ok) throw new Error("HTTP " + r.status);
    doc = await r.json();
  } catch (err) {
    out.replaceChildren(el("p", "Could not read /openapi.json: " + err.message, "error"));
    return;
  }
  out.replaceChildren();
  const list = el("ul");
  let i = 0;
  for (const [path, item] of Object.entries(doc.paths || {})) {
    for (const method of ["get", "post", "put", "patch", "delete"]) {
      if (!item[method]) continue;
      const a = el("a", method.toUpperCase() + " " + path);
      a.href = "#op" + i;
      const li = el("li");
      li.appendChild(a);
      list.appendChild(li);
      out.appendChild(operation(doc, path, method, item[method], i));
      i += 1;
    }
  }
  toc.appendChild(el("p", (doc.info && doc.info.title ? doc.info.title + " " + (doc.info.version || "") + ": " : "") + i + " operations"));
  toc.appendChild(list);
}

main();
