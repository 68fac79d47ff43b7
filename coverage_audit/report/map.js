
(function () {
"use strict";

function esc(s) {
  return String(s).replace(/[&<>"']/g, function (c) {
    return {"&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;"}[c];
  });
}

function el(tag, cls, text) {
  var e = document.createElement(tag);
  if (cls) { e.className = cls; }
  if (text !== undefined && text !== null) { e.textContent = String(text); }
  return e;
}

function fmtInt(v) {
  return (v === null || v === undefined) ? "n/a" : Math.round(v).toLocaleString("en-US");
}

function fmtPct(v, scale) {
  return (v === null || v === undefined) ? "n/a" : (100 * v / scale).toFixed(1) + "%";
}

function fmtNum(v, digits) {
  return (v === null || v === undefined) ? "n/a" : Number(v).toFixed(digits);
}

function fmtP(v) {
  if (v === null || v === undefined) { return "n/a"; }
  return v < 0.001 ? "< 0.001" : Number(v).toFixed(3);
}

// Shapes arrive as one flat, delta-encoded integer chain (lon, lat in units of
// 1/scale degree) with ring, part and shape lengths, which is far smaller than
// GeoJSON and parses in one JSON.parse call.
function decodeShapes(S) {
  var out = new Array(S.shape_parts.length);
  var xy = S.xy, rn = S.ring_len, pr = S.part_rings, sp = S.shape_parts;
  var scale = S.scale, ox = S.origin[0], oy = S.origin[1];
  var k = 0, ri = 0, pi = 0, x = 0, y = 0;
  for (var i = 0; i < sp.length; i++) {
    var parts = [];
    for (var p = 0; p < sp[i]; p++, pi++) {
      var rings = [];
      for (var r = 0; r < pr[pi]; r++, ri++) {
        var m = rn[ri], ring = new Array(m);
        for (var v = 0; v < m; v++) {
          x += xy[k++]; y += xy[k++];
          ring[v] = L.latLng((oy + y) / scale, (ox + x) / scale);
        }
        rings.push(ring);
      }
      parts.push(rings);
    }
    out[i] = parts.length === 1 ? parts[0] : parts;
  }
  return out;
}

window.coverageAuditDraw = function (map, D) {
  var t0 = performance.now();
  var api = window.coverageAuditMap = {ready: false, drawn: 0, expected: D.n, map: map,
                                       view: null, errors: []};
  var container = map.getContainer();
  container.setAttribute("data-areas-expected", String(D.n));

  var overlayPane = map.createPane("caOverlay");
  overlayPane.style.zIndex = 450;
  // Overlays sit above the areas but must let the pointer through, or hovering an area
  // under an enclave outline or a reach circle would show nothing.
  overlayPane.style.pointerEvents = "none";
  var overlayRenderer = L.canvas({pane: "caOverlay", padding: 0.2});
  var areaRenderer = L.canvas({padding: 0.2, tolerance: 0});

  var F = D.fields;
  var n = D.n;
  var S = D.style;
  var bounds = L.latLngBounds(D.bounds);
  map.fitBounds(bounds, {padding: [10, 10]});
  if (D.region_bounds) {
    // The view opens on the study area; this control shows the whole region.
    var regionCtl = L.control({position: "topleft"});
    regionCtl.onAdd = function () {
      var box = el("div", "ca-panel ca-region");
      var whole = el("button", null, "Whole region");
      var study = el("button", null, "Study area");
      whole.type = study.type = "button";
      whole.onclick = function () { map.fitBounds(L.latLngBounds(D.region_bounds)); };
      study.onclick = function () { map.fitBounds(bounds, {padding: [10, 10]}); };
      box.appendChild(whole);
      box.appendChild(study);
      L.DomEvent.disableClickPropagation(box);
      return box;
    };
    regionCtl.addTo(map);
  }

  // Areas: drawn once on one canvas; a view change only restyles them.
  var shapes = decodeShapes(D.areas);
  var timings = api.timings = {decode: performance.now() - t0};
  edgesOn = edgesWanted();
  var base = {renderer: areaRenderer, weight: S.edge_weight, stroke: edgesOn, color: S.edge,
              opacity: S.edge_opacity,
              fillOpacity: S.fill_opacity, fillColor: S.missing};
  var layers = new Array(n);
  var group = L.featureGroup();
  for (var i = 0; i < n; i++) {
    var poly = L.polygon(shapes[i], base);
    poly._caIndex = i;
    layers[i] = poly;
    group.addLayer(poly);
  }
  shapes = null;
  timings.create = performance.now() - t0;

  var views = D.views, viewByKey = {};
  views.forEach(function (v) { viewByKey[v.key] = v; });

  function classOf(view, i) {
    var v = F[view.field][i];
    if (v === null || v === undefined) { return -1; }
    if (view.type === "codes") { return v; }
    var t = view.thresholds;
    for (var c = 0; c < t.length; c++) { if (v < t[c]) { return c; } }
    return t.length;
  }
  function colourOf(view, i) {
    var c = classOf(view, i);
    return c < 0 ? view.missing_color : view.colors[c];
  }
  api.colourOf = function (key, i) { return colourOf(viewByKey[key], i); };
  api.indexOf = function (id) { return F.id.indexOf(String(id)); };
  api.classOf = function (key, i) { return classOf(viewByKey[key], i); };

  // Legend: the active view, then each visible overlay.
  var legend = L.control({position: "bottomright"});
  var legendBox = el("div", "ca-panel ca-legend");
  legendBox.setAttribute("data-role", "legend");
  L.DomEvent.disableClickPropagation(legendBox);
  L.DomEvent.disableScrollPropagation(legendBox);
  legend.onAdd = function () { return legendBox; };
  legend.addTo(map);
  var visibleOverlays = {};

  function swatch(colour, kind) {
    var s = el("span", "ca-swatch" + (kind ? " ca-" + kind : ""));
    if (kind === "line" || kind === "dash") { s.style.borderColor = colour; }
    else { s.style.background = colour; }
    return s;
  }
  function renderLegend() {
    legendBox.textContent = "";
    var view = viewByKey[api.view];
    if (view) {
      legendBox.appendChild(el("h2", null, view.title));
      if (view.note) { legendBox.appendChild(el("p", "ca-note", view.note)); }
      var ul = el("ul");
      for (var c = 0; c < view.colors.length; c++) {
        var li = el("li");
        li.appendChild(swatch(view.colors[c]));
        li.appendChild(el("span", null, view.labels[c]));
        ul.appendChild(li);
      }
      if (view.has_missing) {
        var lm = el("li");
        lm.appendChild(swatch(view.missing_color));
        lm.appendChild(el("span", null, view.missing_label));
        ul.appendChild(lm);
      }
      legendBox.appendChild(ul);
    }
    D.overlays.forEach(function (o) {
      if (!visibleOverlays[o.key]) { return; }
      var ul = el("ul");
      o.legend.forEach(function (item) {
        var li = el("li");
        li.appendChild(swatch(item.color, item.kind));
        li.appendChild(el("span", null, item.label));
        ul.appendChild(li);
      });
      legendBox.appendChild(el("h2", null, o.label));
      legendBox.appendChild(ul);
    });
  }

  // Restyling 85,000 layers one setStyle at a time queues 85,000 redraw requests; when
  // the canvas renderer offers its whole-canvas redraw, set the options and redraw once.
  function restyle(change) {
    var bulk = typeof areaRenderer._redraw === "function" && areaRenderer._map;
    for (var i = 0; i < n; i++) {
      if (bulk) { change(layers[i].options, i); }
      else { var o = {}; change(o, i); layers[i].setStyle(o); }
    }
    if (bulk) { areaRenderer._redraw(); }
  }

  function applyView(key) {
    var view = viewByKey[key];
    if (!view) { return; }
    api.view = key;
    restyle(function (o, i) { o.fillColor = colourOf(view, i); });
    container.setAttribute("data-view", key);
    renderLegend();
  }

  // Edges are drawn only when areas are wide enough on screen: at the whole-region view
  // of a large map they would cover the fill colours.
  function edgesWanted() {
    if (!D.typical_size_m) { return true; }
    var lat = bounds.getCenter().lat * Math.PI / 180;
    var metresPerPixel = 40075016.686 * Math.cos(lat) / Math.pow(2, map.getZoom() + 8);
    return D.typical_size_m / metresPerPixel >= S.edge_min_px;
  }
  var edgesOn;  // set before the areas are created
  function updateEdges() {
    var want = edgesWanted();
    if (want === edgesOn) { return; }
    edgesOn = want;
    restyle(function (o) { o.stroke = want; });
  }
  map.on("zoomend", updateEdges);

  // Hover panel: every figure goes in with textContent.
  var hover = L.control({position: "bottomleft"});
  var hoverBox = el("div", "ca-panel ca-hover");
  hoverBox.setAttribute("data-role", "hover");
  hover.onAdd = function () { return hoverBox; };
  hover.addTo(map);
  function hint() {
    hoverBox.textContent = "";
    hoverBox.appendChild(el("p", "ca-hint", D.texts.hover_hint));
    hoverBox.removeAttribute("data-area");
  }
  hint();

  function row(table, label, value) {
    var tr = el("tr");
    tr.appendChild(el("th", null, label));
    tr.appendChild(el("td", null, value));
    table.appendChild(tr);
  }
  function showArea(i) {
    hoverBox.textContent = "";
    hoverBox.setAttribute("data-area", String(F.id[i]));
    hoverBox.appendChild(el("h2", null, F.id[i]));
    if (F.label && F.label[i] !== null) { hoverBox.appendChild(el("p", "ca-label", F.label[i])); }
    var t = el("table");
    if (F.pop) { row(t, "Population", fmtInt(F.pop[i])); }
    if (F.cf) { row(t, "Covered fraction", fmtPct(F.cf[i], D.scales.cf)); }
    if (F.served) { row(t, "Served", F.served[i] === null ? "n/a" : (F.served[i] ? "yes" : "no")); }
    D.groups.forEach(function (g) {
      row(t, g.label + " share", fmtPct(F[g.field][i], D.scales.share));
    });
    if (F.mm) { row(t, "Majority-minority", F.mm[i] === null ? "n/a" : (F.mm[i] ? "yes" : "no")); }
    if (F.tier) { row(t, "Income tier", F.tier[i] === null ? "n/a" : D.codes.tier[F.tier[i]]); }
    if (F.inc) { row(t, "Income ratio (% of area median)", fmtNum(F.inc[i], 1)); }
    if (F.dist) { row(t, "Nearest site", F.dist[i] === null ? "n/a" : fmtInt(F.dist[i]) + " m"); }
    if (F.lapp) { row(t, "Lender's applications", F.lapp[i] === null ? "n/a" : fmtInt(F.lapp[i])); }
    if (F.lsh) { row(t, "Lender's share of applications", F.lsh[i] === null ? "no applications" : fmtPct(F.lsh[i], D.scales.share)); }
    if (F.lgap) { row(t, "Lending gap", F.lgap[i] === null ? "n/a" : (F.lgap[i] ? "yes" : "no")); }
    if (F.acc) { row(t, "Access (% of region's mean)", F.acc[i] === null ? "n/a" : fmtInt(F.acc[i]) + "%"); }
    if (F.lisa) {
      var lc = F.lisa[i] === null ? "left out" : D.codes.lisa[F.lisa[i]];
      if (D.lisa_fdr && F.lisa_q && F.lisa_q[i] !== null) {
        lc += " (q = " + fmtP(F.lisa_q[i]) + " after false-discovery-rate correction" +
          (F.lisa_p && F.lisa_p[i] !== null ? "; pseudo p = " + fmtP(F.lisa_p[i]) + " before" : "") + ")";
      } else if (F.lisa_p && F.lisa_p[i] !== null) {
        lc += " (pseudo p = " + fmtP(F.lisa_p[i]) + ", no false-discovery-rate correction)";
      }
      row(t, "LISA cluster", lc);
    }
    if (F.enc) {
      var ec = F.enc[i] === null ? "none" : D.codes.enc[F.enc[i]];
      var info = F.enc[i] === null ? null : D.enclave_info[ec];
      if (info) {
        ec += " (population " + fmtInt(info.population) + ", p = " + fmtP(info.p_value) + ")";
      }
      row(t, "Enclave", ec);
    }
    hoverBox.appendChild(t);
  }
  api.showArea = showArea;

  var highlighted = null;
  group.on("mouseover", function (e) {
    var layer = e.layer;
    if (highlighted && highlighted !== layer) {
      highlighted.setStyle({weight: S.edge_weight, color: S.edge, opacity: S.edge_opacity,
                            stroke: edgesOn !== false});
    }
    highlighted = layer;
    layer.setStyle({weight: 2.5, color: S.highlight, opacity: 1, stroke: true});
    layer.bringToFront();
    showArea(layer._caIndex);
  });
  group.on("mouseout", function (e) {
    e.layer.setStyle({weight: S.edge_weight, color: S.edge, opacity: S.edge_opacity,
                      stroke: edgesOn !== false});
    if (highlighted === e.layer) { highlighted = null; }
  });
  group.on("click", function (e) { showArea(e.layer._caIndex); });

  // Views are radio "base layers": empty layer groups whose selection restyles the areas.
  var baseLayers = {}, overlays = {};
  views.forEach(function (v) {
    var lg = L.layerGroup();
    lg._caView = v.key;
    baseLayers[esc(v.label)] = lg;
    v._layer = lg;
  });
  map.on("baselayerchange", function (e) {
    if (e.layer && e.layer._caView) { applyView(e.layer._caView); }
  });
  api.setView = function (key) {
    var v = viewByKey[key];
    if (!v || api.view === key) { return; }
    var current = viewByKey[api.view];
    if (current) { map.removeLayer(current._layer); }
    map.addLayer(v._layer);
  };

  // Overlays.
  D.overlays.forEach(function (o) {
    var lg = L.featureGroup();
    if (o.kind === "outline") {
      var polys = decodeShapes(o.shapes);
      for (var j = 0; j < polys.length; j++) {
        if (o.casing) {
          // A light casing under the dark outline keeps it visible on dark and light fills.
          lg.addLayer(L.polygon(polys[j], {renderer: overlayRenderer, interactive: false,
            color: o.casing, weight: o.weight + 3, fill: false}));
        }
        var pl = L.polygon(polys[j], {renderer: overlayRenderer, interactive: false,
          color: o.color, weight: o.weight, dashArray: o.dash || null,
          fill: !!o.fill_color, fillColor: o.fill_color || o.color,
          fillOpacity: o.fill_opacity || 0});
        if (o.labels) {
          var lab = el("span", null, o.labels[j]);
          // Above the centre, not on it: a one-area enclave stays visible under its label.
          pl.bindTooltip(lab, {permanent: true, direction: "top", offset: [0, -6],
                               className: "ca-enclave-label", interactive: false, opacity: 1});
        }
        lg.addLayer(pl);
      }
    } else if (o.kind === "points") {
      var dot = o.lat.length > 500 ? 1.5 : 3;
      for (var q = 0; q < o.lat.length; q++) {
        var ll = L.latLng(o.lat[q], o.lon[q]);
        if (o.radius_m) {
          lg.addLayer(L.circle(ll, {renderer: overlayRenderer, interactive: false,
            radius: o.radius_m,
            color: o.reach_color, weight: 1, fillColor: o.reach_color, fillOpacity: 0.06}));
        }
        var marker = L.circleMarker(ll, {renderer: overlayRenderer, interactive: !!o.names,
          radius: dot, color: "#ffffff", weight: 1, fillColor: o.color, fillOpacity: 1});
        if (o.names) { marker.bindTooltip(el("span", null, o.names[q]), {direction: "top"}); }
        lg.addLayer(marker);
      }
    } else if (o.kind === "sites") {
      for (var m = 0; m < o.lat.length; m++) {
        var site = L.circleMarker(L.latLng(o.lat[m], o.lon[m]), {renderer: overlayRenderer,
          radius: 6, color: "#ffffff", weight: 2, fillColor: o.colors[m], fillOpacity: 1});
        site.bindTooltip(el("span", null, o.names[m]), {direction: "top"});
        lg.addLayer(site);
      }
    }
    lg._caOverlay = o.key;
    overlays[esc(o.label)] = lg;
    o._layer = lg;
  });
  if (D.tiles) {
    var tl = L.tileLayer(D.tiles.url, {attribution: esc(D.tiles.attribution), maxZoom: 19});
    tl._caOverlay = "tiles";
    overlays[esc(D.tiles.label)] = tl;
    tl.addTo(map);
    visibleOverlays.tiles = true;
  }
  map.on("overlayadd", function (e) {
    if (e.layer && e.layer._caOverlay) {
      visibleOverlays[e.layer._caOverlay] = true;
      renderLegend();
    }
  });
  map.on("overlayremove", function (e) {
    if (e.layer && e.layer._caOverlay) {
      visibleOverlays[e.layer._caOverlay] = false;
      renderLegend();
    }
  });

  // Title panel.
  var titleCtl = L.control({position: "topleft"});
  var titleBox = el("div", "ca-panel ca-title");
  titleBox.appendChild(el("h1", null, D.texts.title));
  D.texts.subtitle.forEach(function (line) { titleBox.appendChild(el("p", null, line)); });
  if (D.texts.finding) {
    var finding = el("p", "ca-finding", D.texts.finding + " ");
    var link = el("a", null, D.texts.findings_link.text);
    link.href = D.texts.findings_link.href;
    finding.appendChild(link);
    titleBox.appendChild(finding);
  }
  titleCtl.onAdd = function () { return titleBox; };
  titleCtl.addTo(map);

  group.addTo(map);
  timings.add = performance.now() - t0;
  D.overlays.forEach(function (o) {
    if (o.visible) { o._layer.addTo(map); visibleOverlays[o.key] = true; }
  });
  if (views.length) {
    views[0]._layer.addTo(map);
    applyView(views[0].key);
  } else {
    renderLegend();
  }
  var control = L.control.layers(baseLayers, overlays, {
    collapsed: D.collapse_control || window.innerWidth < 700, position: "topright"});
  control.addTo(map);
  control.getContainer().setAttribute("data-role", "layers");

  api.drawn = group.getLayers().length;
  api.buildMs = performance.now() - t0;
  container.setAttribute("data-areas-drawn", String(api.drawn));
  api.ready = true;
  // Leaflet paints the canvas in an animation frame requested while drawing; a frame
  // requested now runs after it, so "painted" means the areas are on screen.
  api.painted = false;
  L.Util.requestAnimFrame(function () {
    setTimeout(function () {
      api.painted = true;
      api.paintedMs = performance.now();
      container.setAttribute("data-painted", "true");
    }, 0);
  });
};
})();
