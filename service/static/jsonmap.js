// Where each JSON pointer lives in a JSON text: pointer -> {key, value} character offsets.
// A small tolerant scanner: it stops quietly at the first syntax error and returns what it found.
(function () {
  'use strict';

  function escapeToken(t) { return String(t).replace(/~/g, '~0').replace(/\//g, '~1'); }

  function locate(text) {
    const map = new Map();
    let i = 0;
    const ws = () => { while (i < text.length && ' \t\r\n'.includes(text[i])) i++; };
    function str() {
      const start = i; i++;
      while (i < text.length && text[i] !== '"') { if (text[i] === '\\') i++; i++; }
      i++;
      return JSON.parse(text.slice(start, i));
    }
    function value(ptr, keyAt) {
      ws();
      map.set(ptr, { key: keyAt, value: i });
      const c = text[i];
      if (c === '{') {
        i++; ws();
        if (text[i] === '}') { i++; return; }
        for (;;) {
          ws();
          if (text[i] !== '"') throw new Error('key expected');
          const at = i, k = str();
          ws(); if (text[i] !== ':') throw new Error(': expected'); i++;
          value(ptr + '/' + escapeToken(k), at);
          ws();
          if (text[i] === ',') { i++; continue; }
          if (text[i] === '}') { i++; return; }
          throw new Error(', or } expected');
        }
      } else if (c === '[') {
        i++; ws();
        if (text[i] === ']') { i++; return; }
        for (let n = 0; ; n++) {
          value(ptr + '/' + n, null);
          ws();
          if (text[i] === ',') { i++; continue; }
          if (text[i] === ']') { i++; return; }
          throw new Error(', or ] expected');
        }
      } else if (c === '"') { str(); }
      else { const m = /^[-+0-9.eEa-zA-Z]+/.exec(text.slice(i)); if (!m) throw new Error('value expected'); i += m[0].length; }
    }
    try { value('', null); } catch (e) { /* keep what was found */ }
    return map;
  }

  function lineOf(text, offset) {
    let line = 1;
    for (let k = 0; k < offset && k < text.length; k++) if (text.charCodeAt(k) === 10) line++;
    return line;
  }

  // The line a problem at `pointer` belongs on: the member itself, or its nearest existing parent.
  // Expression problems ("position N: ...") point inside the string value.
  function lineForPointer(text, map, pointer, detail) {
    let p = pointer === '/' ? '' : pointer;
    while (p && !map.has(p)) p = p.slice(0, p.lastIndexOf('/'));
    const hit = map.get(p);
    if (!hit) return 1;
    const m = /^position (\d+)/.exec(detail || '');
    if (m && p === pointer && text[hit.value] === '"') return lineOf(text, hit.value + 1 + Number(m[1]));
    return lineOf(text, hit.key != null ? hit.key : hit.value);
  }

  // A JSON syntax error's line, from the browser's message when it gives a position.
  function syntaxErrorLine(text, err) {
    const m = /position (\d+)/.exec(err.message) || /line (\d+)/.exec(err.message);
    if (!m) return 1;
    return /line/.test(m[0]) ? Number(m[1]) : lineOf(text, Number(m[1]));
  }

  window.SLJson = { locate, lineForPointer, lineOf, syntaxErrorLine };
})();
