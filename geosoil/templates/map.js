/* geosoil map: draws the run's data (one JSON block) with Leaflet.
 * Every text from the user's files reaches the page through textContent, never as HTML. */
(function () {
  "use strict";
  var D = JSON.parse(document.getElementById("geosoil-data").textContent);
  var SMALL = window.matchMedia("(max-width: 600px)").matches;

  function el(tag, cls, text) {
    var e = document.createElement(tag);
    if (cls) { e.className = cls; }
    if (text !== undefined && text !== null) { e.textContent = String(text); }
    return e;
  }

  var map = L.map("map", {zoomControl: true, attributionControl: !!D.tiles, maxZoom: 22});
  [["gs-rasters", 350], ["gs-zones", 410], ["gs-excl", 420], ["gs-top", 450],
   ["gs-samples", 460], ["gs-labels", 470]].forEach(function (p) {
    var pane = map.createPane(p[0]);
    pane.style.zIndex = p[1];
    // names and rates above the sample dots, letting taps through to the samples below
    if (p[0] === "gs-rasters" || p[0] === "gs-labels") { pane.style.pointerEvents = "none"; }
  });
  L.control.scale({imperial: false}).addTo(map);
  var tiles = null;
  if (D.tiles) {
    tiles = L.tileLayer(D.tiles.url, {attribution: D.tiles.attribution, maxZoom: 19});
    map.attributionControl.setPrefix(false);
  }

  // Popups keep clear of the layer panel and the legend (padding updated when they change).
  // (Leaflet pads a popup from the top-left and the bottom-right: the panel is on the right,
  // the legend at the bottom, the title and buttons at the top.)
  var padTL = L.point(12, 12), padBR = L.point(12, 12);
  var popupOptions = {maxWidth: 320, maxHeight: SMALL ? 320 : 460, autoPanPaddingTopLeft: padTL,
                      autoPanPaddingBottomRight: padBR};

  function table(heading, rows) {
    var box = el("div", "gs-popup");
    box.appendChild(el("h4", null, heading));
    var t = el("table");
    rows.forEach(function (r) {
      var tr = el("tr");
      tr.appendChild(el("th", null, r[0]));
      tr.appendChild(el("td", null, r[1]));
      t.appendChild(tr);
    });
    box.appendChild(t);
    return box;
  }

  // ------------------------------------------------------------------ surfaces
  var surfaces = {};
  D.surfaces.forEach(function (s) {
    surfaces[s.id] = L.imageOverlay(s.png, s.bounds, {pane: "gs-rasters", opacity: 1,
                                                      interactive: false, className: "gs-raster"});
  });

  // ------------------------------------------------------------------ zones
  var prescriptions = {};
  D.products.forEach(function (p) {
    var group = L.layerGroup();
    var shapes = L.geoJSON(null, {pane: "gs-zones"});
    p.zones.forEach(function (z) {
      var layer = L.geoJSON(z.g, {pane: "gs-zones"});
      layer.eachLayer(function (l) {
        l.gsColour = z.c;
        var rows = [["Paddock", z.p], ["Rate (" + p.unit + ")", z.r]];
        if (z.s) { rows.push(["Applied as", z.s]); }
        rows.push(["Area", z.a]);
        if (z.l) { rows.push(["Class", z.l]); }
        l.bindPopup(function () { return table(p.product + ": zone " + z.z, rows); },
                    popupOptions);
        l.bindTooltip(el("span", null, "zone " + z.z + ": " + z.r + " " + p.unit), {sticky: true});
        shapes.addLayer(l);
      });
      if (p.labelled && z.at) {
        group.addLayer(L.tooltip({permanent: true, direction: "center", interactive: false,
                                  className: "gs-zone-label", pane: "gs-labels"})
          .setLatLng(z.at).setContent(el("span", null, z.r)));
      }
    });
    group.addLayer(shapes);
    prescriptions[p.product] = {group: group, shapes: shapes, data: p};
  });

  function styleZones(fill) {
    Object.keys(prescriptions).forEach(function (k) {
      prescriptions[k].shapes.eachLayer(function (l) {
        l.setStyle(fill ? {color: "#333333", weight: 1, fillColor: l.gsColour, fillOpacity: 1,
                           dashArray: null}
                        : {color: "#111111", weight: 2, fill: true, fillOpacity: 0,
                           dashArray: "6 4"});
      });
    });
  }

  // ------------------------------------------------------------------ exclusions
  var exclRenderer = L.svg({pane: "gs-excl"});
  var exclusions = L.geoJSON(null, {pane: "gs-excl", renderer: exclRenderer});
  D.exclusions.forEach(function (x) {
    L.geoJSON(x.g, {pane: "gs-excl", renderer: exclRenderer}).eachLayer(function (l) {
      var creek = x.kind === "creek buffer";
      l.setStyle({color: creek ? "#1f4e79" : "#444444", weight: 1.5, dashArray: "4 3",
                  fillColor: creek ? "url(#gs-hatch-creek)" : "url(#gs-hatch)", fillOpacity: 1});
      var what = creek ? "Creek buffer (not spread)" : "Exclusion (not spread)";
      l.bindTooltip(el("span", null, what + ": " + x.name), {sticky: true});
      l.bindPopup(function () {
        return table(what, [["Name", x.name], ["Paddock", x.p], ["Area", x.a]]);
      }, popupOptions);
      exclusions.addLayer(l);
    });
  });

  function addHatches() {
    var svg = exclRenderer._container;
    if (!svg || svg.querySelector("#gs-hatch")) { return; }
    var ns = "http://www.w3.org/2000/svg";
    var defs = document.createElementNS(ns, "defs");
    [["gs-hatch", "#dddddd", "#555555"], ["gs-hatch-creek", "#d6e6f5", "#1f4e79"]]
      .forEach(function (h) {
        var pat = document.createElementNS(ns, "pattern");
        pat.setAttribute("id", h[0]);
        pat.setAttribute("width", "7");
        pat.setAttribute("height", "7");
        pat.setAttribute("patternUnits", "userSpaceOnUse");
        pat.setAttribute("patternTransform", "rotate(45)");
        var r = document.createElementNS(ns, "rect");
        r.setAttribute("width", "7");
        r.setAttribute("height", "7");
        r.setAttribute("fill", h[1]);
        var ln = document.createElementNS(ns, "line");
        ln.setAttribute("x1", "0"); ln.setAttribute("y1", "0");
        ln.setAttribute("x2", "0"); ln.setAttribute("y2", "7");
        ln.setAttribute("stroke", h[2]); ln.setAttribute("stroke-width", "2.5");
        pat.appendChild(r); pat.appendChild(ln); defs.appendChild(pat);
      });
    svg.insertBefore(defs, svg.firstChild);
  }

  // ------------------------------------------------------------------ paddocks
  var paddocks = L.layerGroup();
  D.paddocks.forEach(function (p) {
    L.geoJSON(p.g, {pane: "gs-top", interactive: false,
                    style: {color: "#111111", weight: 2.5, fill: false}}).addTo(paddocks);
    paddocks.addLayer(L.tooltip({permanent: true, direction: "center", interactive: false,
                                 className: "gs-paddock-label", pane: "gs-labels"})
      .setLatLng(p.at).setContent(el("span", null, p.name)));
  });

  // Labels never overlap: paddock names first, then zone rates, each hidden where it would
  // cover one already shown (on a phone or zoomed out most zone rates give way).
  var declutterQueued = false;
  function declutter() {
    declutterQueued = false;
    var shown = [];
    var labels = Array.prototype.slice.call(document.querySelectorAll(".gs-paddock-label"))
      .concat(Array.prototype.slice.call(document.querySelectorAll(".gs-zone-label")));
    labels.forEach(function (e) { e.style.visibility = ""; });
    labels.forEach(function (e) {
      var r = e.getBoundingClientRect();
      if (!r.width) { return; }
      var hit = shown.some(function (q) {
        return r.left < q.right && q.left < r.right && r.top < q.bottom && q.top < r.bottom;
      });
      if (hit) { e.style.visibility = "hidden"; } else { shown.push(r); }
    });
  }
  function queueDeclutter() {
    if (!declutterQueued) { declutterQueued = true; window.requestAnimationFrame(declutter); }
  }
  map.on("zoomend moveend layeradd layerremove resize", queueDeclutter);

  // ------------------------------------------------------------------ samples
  // The layer comes as columns (webmap._samples_json): coordinates in millionths of a
  // degree from the first point, texts per field, an index into the distinct flag lists.
  var S = D.samples;
  var plannedAt = {};
  S.planned.forEach(function (i) { plannedAt[i] = true; });
  function sampleRow(i) {
    return [(S.lat0 + S.lat[i]) / 1e6, (S.lon0 + S.lon[i]) / 1e6, S.id[i],
            S.paddocks[S.paddock[i]], S.values.map(function (v) { return v[i]; }),
            S.flagSets[S.flags[i]], plannedAt[i] ? 1 : 0];
  }
  var sampleRenderer = L.canvas({pane: "gs-samples", padding: 0.2});
  var samples = L.layerGroup();
  var markers = [];
  S.id.forEach(function (id, i) {
    var m = L.circleMarker([(S.lat0 + S.lat[i]) / 1e6, (S.lon0 + S.lon[i]) / 1e6],
                           {renderer: sampleRenderer, pane: "gs-samples",
                            radius: SMALL ? 4 : 5, color: "#000000", weight: 2,
                            fillColor: plannedAt[i] ? "#ffd400" : "#ffffff",
                            fillOpacity: 1});
    m.bindPopup(function () { return samplePopup(i); },
                L.extend({className: "gs-sample-popup"}, popupOptions));
    m.bindTooltip(function () { return el("span", null, S.id[i]); },
                  {direction: "top", offset: [0, -6]});
    samples.addLayer(m);
    markers.push(m);
  });

  function samplePopup(i) {
    var r = sampleRow(i);
    var rows = [];
    D.samples.fields.forEach(function (f, k) {
      var v = r[4][k];
      if (v === null || v === "") { return; }
      rows.push([f[0], f[1] ? v + " " + f[1] : v]);
    });
    var box = table("Sample " + r[2], rows);
    if (r[5].length) {
      var ul = el("ul", "gs-flags");
      r[5].forEach(function (f) { ul.appendChild(el("li", null, f)); });
      box.appendChild(el("div", "gs-flags-title", "Flags"));
      box.appendChild(ul);
    }
    return box;
  }

  // ------------------------------------------------------------------ where am I
  var here = L.layerGroup().addTo(map);
  var status = el("div", "gs-status");
  status.setAttribute("role", "status");
  map.on("locationfound", function (e) {
    here.clearLayers();
    L.circle(e.latlng, {radius: e.accuracy, pane: "gs-top", color: "#0b63ce", weight: 1,
                        fillOpacity: 0.12, interactive: false}).addTo(here);
    L.circleMarker(e.latlng, {pane: "gs-samples", radius: 8, color: "#ffffff", weight: 3,
                              fillColor: "#0b63ce", fillOpacity: 1}).addTo(here)
      .bindTooltip(el("span", null, "You are here (± " + Math.round(e.accuracy) + " m)"));
    status.textContent = "";
  });
  map.on("locationerror", function (e) {
    status.textContent = "Location not available: " + e.message;
  });
  var Locate = L.Control.extend({
    options: {position: "topleft"},
    onAdd: function () {
      var box = el("div", "leaflet-bar gs-locate");
      var b = el("a", null, "◎");
      b.href = "#";
      b.title = "Show where I am (uses this device's location)";
      b.setAttribute("role", "button");
      b.setAttribute("aria-label", "Show where I am");
      L.DomEvent.on(b, "click", function (ev) {
        L.DomEvent.preventDefault(ev);
        status.textContent = "Finding your location…";
        map.locate({setView: true, maxZoom: 17, enableHighAccuracy: true, timeout: 20000});
      });
      L.DomEvent.disableClickPropagation(box);
      box.appendChild(b);
      box.appendChild(status);
      return box;
    }
  });

  // ------------------------------------------------------------------ title
  var Title = L.Control.extend({
    options: {position: "topleft"},
    onAdd: function () {
      var box = el("div", "gs-title");
      box.id = "geosoil-title";
      box.appendChild(el("div", "gs-title-text", D.title));
      if (D.notes.length) {
        var det = el("details", "gs-notes");
        if (!SMALL) { det.open = true; }
        det.appendChild(el("summary", null, "Notes"));
        D.notes.forEach(function (n) { det.appendChild(el("div", "gs-note", n)); });
        box.appendChild(det);
      }
      L.DomEvent.disableClickPropagation(box);
      return box;
    }
  });

  // ------------------------------------------------------------------ state
  var state = {surface: D.open.surface, product: D.open.product, fill: false,
               samples: true, paddocks: true, exclusions: true, tiles: false};

  function apply() {
    Object.keys(surfaces).forEach(function (k) {
      if (k === state.surface) { surfaces[k].addTo(map); } else { map.removeLayer(surfaces[k]); }
    });
    styleZones(state.fill);
    Object.keys(prescriptions).forEach(function (k) {
      if (k === state.product) { prescriptions[k].group.addTo(map); }
      else { map.removeLayer(prescriptions[k].group); }
    });
    [[samples, state.samples], [paddocks, state.paddocks], [exclusions, state.exclusions],
     [tiles, state.tiles]].forEach(function (p) {
      if (!p[0]) { return; }
      if (p[1]) { p[0].addTo(map); } else { map.removeLayer(p[0]); }
    });
    addHatches();
    drawLegend();
    syncInputs();
  }

  // ------------------------------------------------------------------ panel
  var inputs = [];
  function radio(name, value, label, checked, onpick) {
    var lab = el("label", "gs-choice");
    var inp = el("input");
    inp.type = "radio";
    inp.name = name;
    inp.value = value;
    inp.checked = checked;
    inp.addEventListener("change", function () { if (inp.checked) { onpick(); apply(); } });
    lab.appendChild(inp);
    lab.appendChild(el("span", null, label));
    inputs.push({input: inp, get: function () { return state[name === "gs-surface" ? "surface"
                                                                 : "product"] === value; }});
    return lab;
  }
  function check(key, label) {
    var lab = el("label", "gs-choice");
    var inp = el("input");
    inp.type = "checkbox";
    inp.checked = state[key];
    inp.dataset.key = key;
    inp.addEventListener("change", function () { state[key] = inp.checked; apply(); });
    lab.appendChild(inp);
    lab.appendChild(el("span", null, label));
    inputs.push({input: inp, get: function () { return state[key]; }});
    return lab;
  }
  function syncInputs() {
    inputs.forEach(function (i) { i.input.checked = i.get(); });
  }

  function collapsible(id, title, position, startOpen, build) {
    var C = L.Control.extend({
      options: {position: position},
      onAdd: function () {
        var box = el("section", "gs-box");
        box.id = id;
        var head = el("button", "gs-toggle", title);
        head.type = "button";
        var body = el("div", "gs-body");
        body.id = id + "-body";
        head.setAttribute("aria-controls", body.id);
        function set(open) {
          box.classList.toggle("gs-collapsed", !open);
          head.setAttribute("aria-expanded", open ? "true" : "false");
          updatePadding();
        }
        head.addEventListener("click", function () {
          var open = box.classList.contains("gs-collapsed");
          if (open && window.innerWidth <= 600) {  // on a phone, one box open at a time
            ["gs-panel", "gs-legend"].forEach(function (other) {
              var o = document.getElementById(other);
              if (o && o !== box && o.gsSet) { o.gsSet(false); }
            });
          }
          set(open);
        });
        box.gsSet = set;
        box.appendChild(head);
        box.appendChild(body);
        build(body);
        L.DomEvent.disableClickPropagation(box);
        L.DomEvent.disableScrollPropagation(box);
        set(startOpen);
        return box;
      }
    });
    return new C();
  }

  function buildPanel(body) {
    var groups = [["soil", "Soil"], ["error", "Kriging error"], ["rate", "Rate per cell"]];
    var fs = el("fieldset");
    fs.appendChild(el("legend", null, "Map of"));
    groups.forEach(function (g) {
      var items = D.surfaces.filter(function (s) { return s.group === g[0]; });
      if (!items.length) { return; }
      var holder = fs;
      if (g[0] !== "soil") {
        holder = el("details", "gs-sub");
        holder.open = items.some(function (s) { return s.id === state.surface; });
        holder.appendChild(el("summary", null, g[1]));
        fs.appendChild(holder);
      }
      items.forEach(function (s) {
        holder.appendChild(radio("gs-surface", s.id, s.title, state.surface === s.id,
                                 function () { state.surface = s.id; }));
      });
    });
    fs.appendChild(radio("gs-surface", "", "none", !state.surface,
                         function () { state.surface = null; }));
    body.appendChild(fs);
    if (D.products.length) {
      var fz = el("fieldset");
      fz.appendChild(el("legend", null, "Zones"));
      D.products.forEach(function (p) {
        fz.appendChild(radio("gs-product", p.product, p.product + " zones",
                             state.product === p.product,
                             function () { state.product = p.product; }));
      });
      fz.appendChild(radio("gs-product", "", "none", !state.product,
                           function () { state.product = null; }));
      fz.appendChild(check("fill", "fill zones with their rate"));
      body.appendChild(fz);
    }
    var fo = el("fieldset");
    fo.appendChild(el("legend", null, "Show"));
    fo.appendChild(check("samples", "soil samples"));
    fo.appendChild(check("paddocks", "paddock boundaries"));
    if (D.exclusions.length) { fo.appendChild(check("exclusions", "exclusions, creek buffers")); }
    if (tiles) { fo.appendChild(check("tiles", "background map (needs internet)")); }
    body.appendChild(fo);
  }

  var legendBody = null;
  var symbolsOpen = false;
  function swatchList(items) {
    var ul = el("ul", "gs-classes");
    items.forEach(function (it) {
      var li = el("li");
      var sw = el("span", "gs-swatch" + (it.cls ? " " + it.cls : ""));
      if (it.colour) { sw.style.background = it.colour; }
      li.appendChild(sw);
      li.appendChild(el("span", "gs-class-label", it.label));
      ul.appendChild(li);
    });
    return ul;
  }
  function drawLegend() {
    if (!legendBody) { return; }
    legendBody.textContent = "";
    var s = D.surfaces.filter(function (x) { return x.id === state.surface; })[0];
    if (s) {
      var sec = el("div", "gs-legend-entry");
      sec.dataset.surface = s.id;
      sec.appendChild(el("div", "gs-legend-title", s.title + (s.unit ? " (" + s.unit + ")" : "")));
      sec.appendChild(swatchList(s.legend.slice().reverse()));
      if (s.note) { sec.appendChild(el("div", "gs-legend-note", s.note)); }
      legendBody.appendChild(sec);
    }
    var p = state.product && prescriptions[state.product] ? prescriptions[state.product].data
                                                          : null;
    if (p) {
      var zs = el("div", "gs-legend-entry");
      zs.dataset.product = p.product;
      zs.appendChild(el("div", "gs-legend-title", p.product + " zones (" + p.unit + ")"));
      if (state.fill) { zs.appendChild(swatchList(p.legend.slice().reverse())); }
      else { zs.appendChild(swatchList([{cls: "gs-dashed", label: "zone boundary, labelled "
                                                                  + "with its rate"}])); }
      legendBody.appendChild(zs);
    }
    var other = [];
    if (state.samples && S.id.length) {
      if (S.planned.length < S.id.length) {
        other.push({cls: "gs-point", label: "soil sample (tap for lab values)" +
                    (S.id.length < S.n ? ": " + S.id.length.toLocaleString("en") + " of " +
                     S.n.toLocaleString("en") + " drawn, spread evenly" +
                     (S.source ? "; every sample is in " + S.source : "") : "")});
      }
      if (S.planned.length) {
        other.push({cls: "gs-point gs-planned", label: "planned sample (next season)"});
      }
    }
    if (state.paddocks) { other.push({cls: "gs-outline", label: "paddock boundary"}); }
    if (state.exclusions && D.exclusions.length) {
      if (D.exclusions.some(function (x) { return x.kind === "creek buffer"; })) {
        other.push({cls: "gs-hatch-creek", label: "creek buffer: not spread"});
      }
      if (D.exclusions.some(function (x) { return x.kind !== "creek buffer"; })) {
        other.push({cls: "gs-hatch", label: "exclusion: not spread"});
      }
    }
    if (other.length) {  // the symbols: folded away on a phone, where room is short
      var det = el("details", "gs-symbols");
      det.open = !SMALL || symbolsOpen;
      det.addEventListener("toggle", function () { symbolsOpen = det.open; updatePadding(); });
      det.appendChild(el("summary", null, "Symbols"));
      det.appendChild(swatchList(other));
      legendBody.appendChild(det);
    }
    updatePadding();
  }

  function updatePadding() {
    var panel = document.getElementById("gs-panel");
    var legend = document.getElementById("gs-legend");
    if (panel) { padBR.x = panel.offsetWidth + 20; }
    if (legend) { padBR.y = legend.offsetHeight + 40; }
    var tl = document.querySelector(".leaflet-top.leaflet-left");
    if (tl) { padTL.x = 12; padTL.y = tl.offsetHeight + 12; }
  }

  map.addControl(new Title());
  map.addControl(new Locate());
  var panelCtl = collapsible("gs-panel", "Layers", "topright", !SMALL, buildPanel);
  map.addControl(panelCtl);
  var legendCtl = collapsible("gs-legend", "Legend", "bottomleft", !SMALL,
                              function (body) { legendBody = body; });
  map.addControl(legendCtl);
  map.on("popupopen", function () {
    if (window.innerWidth <= 600) {
      ["gs-panel", "gs-legend"].forEach(function (id) {
        var box = document.getElementById(id);
        if (box && box.gsSet) { box.gsSet(false); }
      });
    }
  });
  window.addEventListener("resize", updatePadding);

  if (D.view) { map.fitBounds(D.view, {padding: [20, 20]}); } else { map.setView([0, 0], 2); }
  apply();

  window.geosoilMap = {
    map: map, surfaces: surfaces, prescriptions: prescriptions, samples: samples,
    markers: markers, paddocks: paddocks, exclusions: exclusions, data: D, state: state,
    show: function (changes) { L.extend(state, changes); apply(); }
  };
})();
