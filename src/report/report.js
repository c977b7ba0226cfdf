"use strict";
(function () {
  // Sortable tables: a click on a heading's button sorts by that column (numbers by value).
  document.querySelectorAll("table.sortable").forEach(function (table) {
    table.querySelectorAll("th button").forEach(function (btn) {
      btn.addEventListener("click", function () {
        var col = +btn.dataset.col, th = btn.parentElement;
        var asc = th.getAttribute("aria-sort") !== "ascending";
        table.querySelectorAll("th").forEach(function (h) { h.removeAttribute("aria-sort"); });
        th.setAttribute("aria-sort", asc ? "ascending" : "descending");
        var body = table.tBodies[0], rows = Array.prototype.slice.call(body.rows);
        var key = function (r) {
          var c = r.cells[col]; if (!c) return "";
          var v = c.dataset.v !== undefined ? c.dataset.v : c.textContent;
          var n = parseFloat(v); return isNaN(n) ? v.toLowerCase() : n;
        };
        rows.sort(function (a, b) {
          var x = key(a), y = key(b), o = x < y ? -1 : x > y ? 1 : 0;
          return asc ? o : -o;
        });
        rows.forEach(function (r) { body.appendChild(r); });
      });
    });
  });

  var el = document.getElementById("thiomap-data");
  var canvas = document.getElementById("unitmap");
  var panel = document.getElementById("inspector");
  if (!el || !canvas || !panel) return;
  var d = JSON.parse(el.textContent);
  function f32(b64) {
    if (!b64) return null;
    var s = atob(b64), u = new Uint8Array(s.length);
    for (var i = 0; i < s.length; i++) u[i] = s.charCodeAt(i);
    return new Float32Array(u.buffer);
  }
  var labels = f32(d.labels), ab = f32(d.ab), se = f32(d.se);
  var sp = d.spectra, obs = null;
  if (sp) {
    // 16-bit samples per band (lo + q × step; 65535 is no data), as the page stores them.
    var raw = atob(sp.obs_u16), u8 = new Uint8Array(raw.length);
    for (var i = 0; i < raw.length; i++) u8[i] = raw.charCodeAt(i);
    var q = new Uint16Array(u8.buffer), nbq = sp.centres_um.length;
    obs = new Float32Array(q.length);
    for (i = 0; i < q.length; i++) {
      var bq = i % nbq;
      obs[i] = q[i] === 65535 ? NaN : sp.obs_lo[bq] + q[i] * sp.obs_step[bq];
    }
  }
  var gr = d.grid_rows, gc = d.grid_cols, np = d.ids.length;
  if (!gr || !gc) { panel.textContent = "No abundance or unit planes: nothing to inspect."; return; }
  var units = {};
  d.units.forEach(function (u) { if (u.unit !== null) units[u.unit] = u; });
  function hexrgb(h) {
    if (!h || h.length !== 7) return [128, 128, 128];
    return [parseInt(h.substr(1, 2), 16), parseInt(h.substr(3, 2), 16), parseInt(h.substr(5, 2), 16)];
  }
  var ctx = canvas.getContext("2d");
  var base = ctx.createImageData(gc, gr);
  for (var g = 0; g < gr * gc; g++) {
    var gy = Math.floor(g / gc), gx = g % gc;
    var y = d.row0_at_bottom ? gr - 1 - gy : gy;
    var l = labels ? labels[g] : 0, rgb = l > 0 && units[l] ? hexrgb(units[l].colour) : [38, 52, 92];
    var o = 4 * (y * gc + gx);
    base.data[o] = rgb[0]; base.data[o + 1] = rgb[1]; base.data[o + 2] = rgb[2]; base.data[o + 3] = 255;
  }
  var cur = { gy: Math.floor(gr / 2), gx: Math.floor(gc / 2) };
  function draw() {
    ctx.putImageData(base, 0, 0);
    var y = d.row0_at_bottom ? gr - 1 - cur.gy : cur.gy;
    ctx.fillStyle = "#000";
    ctx.fillRect(cur.gx - 2, y, 5, 1); ctx.fillRect(cur.gx, y - 2, 1, 5);
    ctx.fillStyle = "#fff";
    ctx.fillRect(cur.gx, y, 1, 1);
  }
  function fmt(v, n) {
    if (!isFinite(v)) return "—";
    if (v === 0) return "0";
    var a = Math.abs(v);
    return a < 1e-3 || a >= 1e5 ? v.toExponential(n - 1) : v.toPrecision(n);
  }
  // Abundances and errors below 10⁻⁶ are the solver's zeros: shown as such (the exact
  // value stays in data-value).
  function tiny(v, n) { return isFinite(v) && v !== 0 && Math.abs(v) < 1e-6 ? "< 1e-6" : fmt(v, n); }
  function esc(s) {
    return String(s).replace(/[&<>"']/g, function (c) {
      return { "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;" }[c];
    });
  }
  function chart(xs, ys, fit) {
    var w = 560, h = 220, L = 60, R = 24, T = 10, B = 36;
    var all = ys.concat(fit || []).filter(isFinite);
    if (!all.length) return "<p>No finite samples.</p>";
    var y0 = Math.min.apply(null, all), y1 = Math.max.apply(null, all);
    if (y1 - y0 < 1e-12) { y0 -= 0.5; y1 += 0.5; }
    var x0 = xs[0], x1 = xs[xs.length - 1];
    var px = function (x) { return L + (x - x0) / ((x1 - x0) || 1) * (w - L - R); };
    var py = function (y) { return T + (1 - (y - y0) / (y1 - y0)) * (h - T - B); };
    var line = function (v) {
      return v.map(function (y, i) { return isFinite(y) ? px(xs[i]).toFixed(1) + "," + py(y).toFixed(1) : null; })
        .filter(Boolean).join(" ");
    };
    var s = '<svg class="chart" viewBox="0 0 ' + w + " " + h + '" role="img" aria-label="The pixel\'s spectrum and its modelled fit">';
    s += '<rect class="frame" x="' + L + '" y="' + T + '" width="' + (w - L - R) + '" height="' + (h - T - B) + '"/>';
    [y0, (y0 + y1) / 2, y1].forEach(function (v) {
      s += '<text class="tick" x="' + (L - 4) + '" y="' + (py(v) + 4).toFixed(1) + '" text-anchor="end">' + fmt(v, 3) + "</text>";
    });
    [x0, (x0 + x1) / 2, x1].forEach(function (v) {
      s += '<text class="tick" x="' + px(v).toFixed(1) + '" y="' + (h - B + 14) + '" text-anchor="middle">' + fmt(v, 3) + "</text>";
    });
    s += '<text class="al" x="' + ((L + w - R) / 2) + '" y="' + (h - 4) + '" text-anchor="middle">wavelength, µm</text>';
    s += '<polyline fill="none" stroke="#0072B2" stroke-width="1.8" points="' + line(ys) + '"/>';
    if (fit) s += '<polyline fill="none" stroke="#D55E00" stroke-width="1.5" stroke-dasharray="6 3" points="' + line(fit) + '"/>';
    return s + "</svg>";
  }
  function show() {
    draw();
    var g = cur.gy * gc + cur.gx, r = cur.gy * d.step, c = cur.gx * d.step;
    var l = labels ? labels[g] : 0, u = units[l];
    var h = '<h3>Pixel: row ' + r + ", column " + c + "</h3>";
    h += "<p>Unit: " + (l > 0 ? esc(l + " — " + (u ? u.label : "")) : "no data") + "</p>";
    panel.dataset.row = r; panel.dataset.col = c;
    var cols = '<div class="cols">';
    var t = '<table><thead><tr><th scope="col">member</th><th scope="col">abundance</th><th scope="col">± standard error</th></tr></thead><tbody>';
    for (var j = 0; j < np; j++) {
      var a = ab ? ab[g * np + j] : NaN, e = se ? se[g * np + j] : NaN;
      t += '<tr><th scope="row">' + esc(d.ids[j]) + '</th><td data-id="' + esc(d.ids[j]) + '" data-value="' + a + '">' +
        tiny(a, 4) + '</td><td data-se="' + esc(d.ids[j]) + '" data-value="' + e + '">' + tiny(e, 2) + "</td></tr>";
    }
    t += "</tbody></table>";
    cols += "<div>" + (ab ? t : "<p>abundance.fits is missing.</p>") + "</div>";
    if (sp && obs) {
      var nb = sp.centres_um.length, ys = [], fit = [];
      var shadeP = d.ids.indexOf("shade"), s = shadeP >= 0 && ab ? ab[g * np + shadeP] : 0;
      for (var b = 0; b < nb; b++) {
        ys.push(obs[g * nb + b]);
        var m = 0;
        for (var k = 0; k < sp.columns.length; k++) {
          var p = sp.plane[k]; if (p === null || !ab) continue;
          var raw = p === shadeP ? s : ab[g * np + p] * (1 - s);
          m += sp.e[k][b] * raw;
        }
        fit.push(m);
      }
      var rss = 0, n = 0;
      for (b = 0; b < nb; b++) if (isFinite(ys[b])) { rss += (ys[b] - fit[b]) * (ys[b] - fit[b]); n++; }
      cols += "<div>" + chart(sp.centres_um, ys, ab ? fit : null) +
        '<p class="note"><span style="color:#0072B2">━</span> observed (' + esc(sp.what) + ') · <span style="color:#D55E00">╌</span> modelled from the abundances' +
        (n ? "; RMSE " + fmt(Math.sqrt(rss / n), 3) : "") + "</p></div>";
    } else {
      cols += "<div><p>" + esc(d.notes.join(" ") || "No spectra on this page.") + "</p></div>";
    }
    panel.innerHTML = h + cols + "</div>";
  }
  function at(ev) {
    var box = canvas.getBoundingClientRect();
    var gx = Math.floor((ev.clientX - box.left) / box.width * gc);
    var y = Math.floor((ev.clientY - box.top) / box.height * gr);
    gx = Math.max(0, Math.min(gc - 1, gx)); y = Math.max(0, Math.min(gr - 1, y));
    cur.gx = gx; cur.gy = d.row0_at_bottom ? gr - 1 - y : y;
    show();
  }
  canvas.addEventListener("mousemove", at);
  canvas.addEventListener("click", at);
  canvas.addEventListener("pointerdown", at);
  canvas.addEventListener("keydown", function (ev) {
    var k = ev.key, n = ev.shiftKey ? 10 : 1, up = d.row0_at_bottom ? 1 : -1;
    if (k === "ArrowLeft") cur.gx = Math.max(0, cur.gx - n);
    else if (k === "ArrowRight") cur.gx = Math.min(gc - 1, cur.gx + n);
    else if (k === "ArrowUp") cur.gy = Math.max(0, Math.min(gr - 1, cur.gy + up * n));
    else if (k === "ArrowDown") cur.gy = Math.max(0, Math.min(gr - 1, cur.gy - up * n));
    else return;
    ev.preventDefault();
    show();
  });
  show();
})();
