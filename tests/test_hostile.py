"""Hostile map data: names and tags carrying HTML and script are shown as text, never run.

An invented OSM file (written here, CC0) names its streets, school, shops, park and stop with
payloads that would run script if a page put them into HTML or JavaScript unescaped. Each
payload sets ``window.__rr_pwned`` to its own id when it runs. The file is built, a route
(named with a payload too) is scored, alternatives are suggested and an area (named with a
payload) is reviewed through the command line; every HTML page is opened in headless
chromium (tests/_browser.py) with a probe that renders every popup and tooltip the way
Leaflet does (the content into ``innerHTML``). The checks: no payload ran, no console error,
no request, no ``javascript:`` link in the DOM, and the payloads' literal text is visible.
"""

from __future__ import annotations

import contextlib
import html
import io
import json
import re
from pathlib import Path
from xml.sax.saxutils import quoteattr

import pytest

from routerisk.cli import main
from routerisk.network.folder import load_network
from routerisk.render import mapview

from ._browser import inspect_page, needs_chromium

PAYLOADS = {
    "script": '<script>window.__rr_pwned="script"</script>',
    "img": '"><img src=x onerror="window.__rr_pwned=\'img\'">',
    "link": 'javascript:window.__rr_pwned="link"',
    "anchor": "<a href=\"javascript:window.__rr_pwned='anchor'\">Anchor Street</a>",
    "template": '${window.__rr_pwned="template"}',
    "backtick": '`+(window.__rr_pwned="backtick")+`',
    "close": '</script><script>window.__rr_pwned="close"</script>',
    "svg": "<svg onload=\"window.__rr_pwned='svg'\">",
    "backslash": "Back\\slash \\u00zz Road",
    "entity": "&lt;b&gt;Entity &amp; Road",
}
# 5 x 5 grid of two-way streets; rows and columns carry the payloads as names
N = 5
STEP = 0.0012
LAT0, LON0 = 38.5, -38.0
STREETS = list(PAYLOADS)  # row r: STREETS[r], column c: STREETS[N + c]
ROUTE_NAME = PAYLOADS["img"] + " route"
AREA_NAME = PAYLOADS["svg"] + " area"
DEPART = "2027-03-09T08:10"  # a Tuesday at school arrival: the school rule is in force


def _tags(**tags: str) -> str:
    return "".join(f"<tag k={quoteattr(k)} v={quoteattr(v)}/>" for k, v in tags.items())


def _node(i: int, lat: float, lon: float, **tags: str) -> str:
    return f'<node id="{i}" version="1" lat="{lat:.7f}" lon="{lon:.7f}">{_tags(**tags)}</node>\n'


def _way(i: int, refs: list[int], **tags: str) -> str:
    nds = "".join(f'<nd ref="{r}"/>' for r in refs)
    return f'<way id="{i}" version="1">{nds}{_tags(**tags)}</way>\n'


def hostile_osm(path: Path) -> Path:
    """Write the invented hostile town: payload street names, sources and tags."""
    parts = []
    nid = lambda r, c: 1 + r * N + c  # noqa: E731
    for r in range(N):
        for c in range(N):
            tags = {"highway": "crossing", "crossing": PAYLOADS["link"]} if (r, c) == (2, 1) else {}
            parts.append(_node(nid(r, c), LAT0 + r * STEP, LON0 + c * STEP, **tags))
    for r in range(N):
        parts.append(
            _way(
                100 + r,
                [nid(r, c) for c in range(N)],
                highway="residential",
                name=PAYLOADS[STREETS[r]],
                website=PAYLOADS["link"],
                maxspeed="25 mph",
            )
        )
    for c in range(N):
        parts.append(
            _way(
                200 + c,
                [nid(r, c) for r in range(N)],
                highway="residential",
                name=PAYLOADS[STREETS[N + c]],
                note=PAYLOADS["script"],
            )
        )
    mid_lat, mid_lon = LAT0 + 2.5 * STEP, LON0 + 2.5 * STEP
    parts.append(
        _node(
            900,
            LAT0 + 1.5 * STEP,
            LON0 + 1.5 * STEP,
            amenity="school",
            name=PAYLOADS["template"],
            website=PAYLOADS["link"],
        )
    )
    parts.append(_node(901, mid_lat, LON0 + 0.5 * STEP, shop="bakery", name=PAYLOADS["img"]))
    parts.append(
        _node(902, LAT0 + 3.5 * STEP, mid_lon, highway="bus_stop", name=PAYLOADS["backtick"])
    )
    parts.append(
        _node(903, LAT0 + 0.5 * STEP, LON0 + 3.5 * STEP, amenity="hospital", name=PAYLOADS["close"])
    )
    ring = [(3.2, 3.2), (3.2, 3.8), (3.8, 3.8), (3.8, 3.2)]
    for k, (a, b) in enumerate(ring):
        parts.append(_node(910 + k, LAT0 + a * STEP, LON0 + b * STEP))
    parts.append(_way(300, [910, 911, 912, 913, 910], leisure="park", name=PAYLOADS["svg"]))
    parts.append(
        _way(301, [910, 911, 912, 913, 910], shop=PAYLOADS["anchor"], name=PAYLOADS["backslash"])
    )
    text = (
        '<?xml version="1.0" encoding="UTF-8"?>\n<osm version="0.6" '
        'generator="routerisk-tests">\n' + "".join(parts) + "</osm>\n"
    )
    path.write_text(text, encoding="utf-8")
    return path


#: Appended to a copy of each page: renders every popup and tooltip content (functions are
#: called for each feature, as Leaflet does on opening) into a visible sink, in the page and
#: in its srcdoc iframes, then collects the text that is not script or style.
PROBE = r"""
<script>
(function () {
  function texts(doc) {
    var out = [], w = doc.createTreeWalker(doc.body || doc.documentElement, NodeFilter.SHOW_TEXT);
    while (w.nextNode()) {
      var p = w.currentNode.parentNode && w.currentNode.parentNode.nodeName;
      if (p !== 'SCRIPT' && p !== 'STYLE' && p !== 'NOSCRIPT') out.push(w.currentNode.nodeValue);
    }
    return out.join(' ');
  }
  function render(win) {
    var L = win.L, doc = win.document, sink = doc.createElement('div');
    sink.id = 'rr-probe-sink';
    doc.body.appendChild(sink);
    function put(v) {
      if (v == null) return;
      var d = doc.createElement('div');
      if (typeof v === 'string') d.innerHTML = v; else d.appendChild(v);
      sink.appendChild(d);
    }
    if (!L) return;
    var seen = new Set();
    function visit(l) {
      if (!l || seen.has(l)) return;
      seen.add(l);
      ['_popup', '_tooltip'].forEach(function (k) {
        var b = l[k];
        if (!b) return;
        if (typeof b._content === 'function') {
          if (l.eachLayer) l.eachLayer(function (c) { put(b._content(c)); });
          else put(b._content(l));
        } else if (b._content != null) {
          put(b._content);
        }
      });
      if (l.eachLayer) l.eachLayer(visit);
    }
    Object.keys(win).forEach(function (k) {
      var o;
      try { o = win[k]; } catch (e) { return; }
      if (o && typeof o === 'object' && o instanceof L.Layer) visit(o);
    });
  }
  window.addEventListener('load', function () {
    var wins = [window];
    document.querySelectorAll('iframe').forEach(function (f) { wins.push(f.contentWindow); });
    wins.forEach(function (w) { try { render(w); } catch (e) { console.error('probe: ' + e); } });
    setTimeout(function () {
      var docs = wins.map(function (w) { return w.document; });
      window.__rr_probe = JSON.stringify({
        pwned: wins.map(function (w) {
          return w.__rr_pwned === undefined ? null : String(w.__rr_pwned);
        }),
        text: docs.map(texts).join(' '),
        js_links: docs.map(function (d) {
          return Array.prototype.filter.call(d.querySelectorAll('*'), function (el) {
            return Array.prototype.some.call(el.attributes, function (a) {
              return /^\s*javascript:/i.test(a.value);
            });
          }).length;
        }).reduce(function (a, b) { return a + b; }, 0),
        payload_elements: docs.map(function (d) {
          return d.querySelectorAll('img[src="x"], svg[onload], a[href^="javascript"]').length;
        }).reduce(function (a, b) { return a + b; }, 0),
        layers: wins.map(function (w) { return w.L ? 1 : 0; })
      });
    }, 700);
  });
})();
</script>
"""


@pytest.fixture(scope="module")
def pages(tmp_path_factory) -> dict[str, Path]:
    """Build the hostile town and write every kind of HTML page over it."""
    d = tmp_path_factory.mktemp("hostile")
    src = hostile_osm(d / "hostile.osm")
    net_dir = d / "net"
    assert main(["build", str(src), "--out", str(net_dir), "--timezone", "Etc/GMT+3"]) == 0
    route = d / "route.geojson"
    # along column 1, which passes the school within the rule's 60 m at school arrival
    coords = [[LON0 + STEP, LAT0], [LON0 + STEP, LAT0 + 4 * STEP]]
    route.write_text(
        json.dumps(
            {
                "type": "FeatureCollection",
                "features": [
                    {
                        "type": "Feature",
                        "properties": {"name": ROUTE_NAME, "depart": DEPART},
                        "geometry": {"type": "LineString", "coordinates": coords},
                    }
                ],
            }
        )
    )
    area = d / "area.geojson"
    a0, a1 = -0.2 * STEP, 4.2 * STEP
    ring = [[LON0 + x, LAT0 + y] for x, y in ((a0, a0), (a1, a0), (a1, a1), (a0, a1), (a0, a0))]
    area.write_text(
        json.dumps(
            {
                "type": "FeatureCollection",
                "features": [
                    {
                        "type": "Feature",
                        "properties": {"name": AREA_NAME},
                        "geometry": {"type": "Polygon", "coordinates": [ring]},
                    }
                ],
            }
        )
    )
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        assert (
            main(
                [
                    "score",
                    str(route),
                    "--network",
                    str(net_dir),
                    "--out",
                    str(d / "scores"),
                    "--json",
                ]
            )
            == 0
        )
    scored = json.loads(out.getvalue())["routes"][0]
    assert scored["rule_breaks"], "the route should break the school rule (a map tooltip)"
    assert (
        main(["suggest", str(route), "--network", str(net_dir), "--map", str(d / "suggest.html")])
        == 0
    )
    assert (
        main(
            [
                "review",
                str(area),
                "--network",
                str(net_dir),
                "--report",
                str(d / "review.html"),
                "--out",
                str(d / "review"),
            ]
        )
        == 0
    )
    net = load_network(net_dir)
    mapview.save(mapview.network_map(net), d / "network.html")
    return {
        "network": d / "network.html",
        "score": d / "scores" / "map.html",
        "suggest": d / "suggest.html",
        "review": d / "review.html",
        "review_out": d / "review" / "report.html",
        "_net": net_dir,
    }


def test_hostile_town_builds_with_its_names(pages):
    net = load_network(pages["_net"])
    names = set(net.edges["name"])
    # every street payload survives as a name (merged edges may join two names with " / ")
    joined = " | ".join(names)
    for key in STREETS:
        assert PAYLOADS[key] in joined, key
    assert PAYLOADS["template"] in set(net.sources["name"])
    assert net.edges["rule_0"].any()  # the school rule covers some edges


@pytest.mark.parametrize("kind", ["network", "score", "suggest", "review", "review_out"])
def test_payloads_never_reach_markup_unescaped(pages, kind):
    text = pages[kind].read_text(encoding="utf-8")
    for key in ("script", "img", "close", "svg", "anchor"):
        assert PAYLOADS[key] not in text, key
    for key in ("template", "backtick"):
        assert PAYLOADS[key] not in text, key
        if kind in ("network", "score", "suggest"):
            # a map page holds no text merely HTML-escaped: in folium's tooltip template
            # literals ``${...}`` and a backtick would still run (report tables may: there
            # it is plain HTML text)
            assert html.escape(PAYLOADS[key], quote=True) not in text, key


def _expected_text(pages, kind: str) -> list[str]:
    """Return the payload strings that the page shows (as text) somewhere."""
    if kind == "network":
        shown = [PAYLOADS[k] for k in STREETS] + [
            PAYLOADS[k] for k in ("template", "img", "backtick", "close")
        ]
    elif kind in ("score", "suggest"):
        shown = [ROUTE_NAME]
        seg = json.loads((pages["score"].parent / "segments.geojson").read_text())
        shown += sorted({f["properties"]["street"] for f in seg["features"]})
    else:
        doc = json.loads((pages["review_out"].parent / "areas.json").read_text())
        shown = [AREA_NAME] + [h["street"] for h in doc["areas"][0]["hotspots"][:3]]
    return shown


@needs_chromium
@pytest.mark.browser
@pytest.mark.parametrize("kind", ["network", "score", "suggest", "review"])
def test_no_payload_runs_in_chromium(pages, kind, tmp_path):
    page = pages[kind]
    probe = tmp_path / page.name
    html = page.read_text(encoding="utf-8")
    at = html.rfind("</body>")
    probe.write_text(html[:at] + PROBE + html[at:] if at >= 0 else html + PROBE, encoding="utf-8")
    res = inspect_page(probe, script="window.__rr_probe || null")
    assert res["value"], f"the probe did not finish; errors: {res['errors']}"
    got = json.loads(res["value"])
    assert got["pwned"] == [None] * len(got["pwned"]), got["pwned"]
    assert any(got["layers"]), "no map loaded"
    assert res["errors"] == [], res["errors"]
    assert res["requests"] == [], res["requests"]
    assert got["js_links"] == 0 and got["payload_elements"] == 0
    text = got["text"]
    missing = [s for s in _expected_text(pages, kind) if s not in text]
    assert not missing, missing


# ------------------------------------------------------------------ safety of user files

PACKAGE = Path(__file__).resolve().parents[1] / "routerisk"
#: Ways of turning a file's content into running code or arbitrary objects.
UNSAFE = (
    re.compile(r"\bpickle\b|\bcPickle\b|\bdill\b|\bshelve\b|\bmarshal\.loads?\b"),
    re.compile(r"\byaml\.(load|unsafe_load|full_load|load_all)\s*\("),
    re.compile(r"yaml\.(Unsafe|Full)?Loader\b"),
    re.compile(r"(?<![\w.])(eval|exec)\s*\("),
    re.compile(r"allow_pickle\s*=\s*True"),
)


def test_no_unsafe_loader_or_eval_in_the_package():
    found = []
    for path in sorted(PACKAGE.rglob("*.py")):
        for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
            if any(p.search(line) for p in UNSAFE):
                found.append(f"{path.relative_to(PACKAGE.parent)}:{n}: {line.strip()}")
    assert not found, found
    # the check itself can fail
    assert any(p.search("data = pickle.loads(raw)") for p in UNSAFE)
    assert any(p.search("doc = yaml.load(text, Loader=yaml.Loader)") for p in UNSAFE)
    assert any(p.search("value = eval(cell)") for p in UNSAFE)
    assert not any(p.search("doc = yaml.safe_load(text)") for p in UNSAFE)


def test_profile_with_python_tags_is_refused_without_running(tmp_path):
    # PyYAML's unsafe loader would call os.system here; the safe loader refuses the tag
    from routerisk.errors import ProfileError
    from routerisk.profile import load_profile

    marker = tmp_path / "ran"
    bad = tmp_path / "evil.yaml"
    bad.write_text(
        f"version: 1\nname: !!python/object/apply:os.system ['touch {marker}']\ncategories: {{}}\n",
        encoding="utf-8",
    )
    with pytest.raises(ProfileError) as info:
        load_profile(bad)
    assert info.value.path == str(bad) and not marker.exists()


def test_overlay_with_python_tags_is_refused_without_running(tmp_path, town_net):
    from routerisk.errors import InputFileError
    from routerisk.network.overlay import apply_overlay

    marker = tmp_path / "ran"
    bad = tmp_path / "evil-overlay.yaml"
    bad.write_text(
        "version: 1\nkind: routerisk-overlay\nedges: !!python/object/apply:"
        f"os.system ['touch {marker}']\n",
        encoding="utf-8",
    )
    with pytest.raises(InputFileError):
        apply_overlay(town_net, bad)
    assert not marker.exists()
