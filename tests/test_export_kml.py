"""Tests of the KML export: it parses back (lxml and fastkml) with the same coordinates."""

from __future__ import annotations

import numpy as np
import pytest
from fastkml import kml as fkml
from lxml import etree
from support.synthetic_result import make_result

from balloonpath.export.kml import forecast_kml, kml_color, write_forecast_kml
from balloonpath.zones import compute_zones

NS = {"k": "http://www.opengis.net/kml/2.2"}


@pytest.fixture(scope="module")
def written(tmp_path_factory):  # noqa: ANN001, ANN201
    result = make_result(n=120, seed=31)
    zones = compute_zones(result)
    path = write_forecast_kml(result, zones, tmp_path_factory.mktemp("kml") / "flight.kml")
    return result, zones, path


def _coords(text: str) -> np.ndarray:
    return np.array([[float(v) for v in c.split(",")] for c in text.split()])


def test_kml_parses_with_same_track_coordinates(written) -> None:  # noqa: ANN001
    result, _zones, path = written
    root = etree.parse(str(path)).getroot()
    assert root.tag == "{http://www.opengis.net/kml/2.2}kml"
    lines = root.findall(".//k:Placemark[k:name='Nominal track']/k:LineString", NS)
    assert len(lines) == 1
    assert lines[0].findtext("k:altitudeMode", namespaces=NS) == "absolute"
    xyz = _coords(lines[0].findtext("k:coordinates", namespaces=NS))
    tr = result.nominal
    np.testing.assert_allclose(xyz[:, 0], tr.lon, atol=5e-7)  # KML order: lon, lat, alt
    np.testing.assert_allclose(xyz[:, 1], tr.lat, atol=5e-7)
    np.testing.assert_allclose(xyz[:, 2], tr.alt_m, atol=0.05)
    span = root.find(".//k:Placemark[k:name='Nominal track']/k:TimeSpan", NS)
    assert span.findtext("k:begin", namespaces=NS) == "2025-06-15T15:06:40Z"


def test_kml_placemarks_zones_and_members(written) -> None:  # noqa: ANN001
    result, zones, path = written
    root = etree.parse(str(path)).getroot()
    folders = [f.findtext("k:name", namespaces=NS) for f in root.findall(".//k:Folder", NS)]
    assert folders == ["Flight", "Track times", "Landing zones", "Burst zones", "Member landings"]
    landing = root.find(".//k:Placemark[k:name='Landing']", NS)
    assert "km from launch" in landing.findtext("k:description", namespaces=NS)
    lon, lat, _ = _coords(landing.findtext(".//k:coordinates", namespaces=NS))[0]
    assert (lat, lon) == pytest.approx((result.landing.lat[0], result.landing.lon[0]), abs=5e-7)
    members = root.findall(".//k:Folder[k:name='Member landings']/k:Placemark", NS)
    assert len(members) == result.n_members
    polys = root.findall(".//k:Folder[k:name='Landing zones']/k:Placemark", NS)
    assert [p.findtext("k:name", namespaces=NS) for p in polys] == [
        "Landing 50% ellipse",
        "Landing 90% ellipse",
        "Landing 95% ellipse",
        "Landing 90% region",
    ]
    ring = _coords(polys[1].findtext(".//k:outerBoundaryIs//k:coordinates", namespaces=NS))
    np.testing.assert_allclose(ring[:, 1], zones.ellipse_rings[1].lat, atol=5e-7)
    np.testing.assert_allclose(ring[:, 0], zones.ellipse_rings[1].lon, atol=5e-7)


def test_fastkml_reads_the_document(written) -> None:  # noqa: ANN001
    _result, _zones, path = written
    doc = fkml.KML.from_string(path.read_bytes())
    top = list(doc.features)
    assert len(top) == 1
    names = [f.name for f in top[0].features]
    assert names[:2] == ["Flight", "Track times"]


def test_kml_colour_order_and_determinism(written) -> None:  # noqa: ANN001
    # OGC KML 2.2 §16.9 (colorType): aabbggrr, so pure red at full opacity is ff0000ff.
    assert kml_color("#FF0000") == "ff0000ff"
    assert kml_color("#0072B2", 0.5) == "80b27200"
    result, zones, path = written
    assert forecast_kml(result, zones).encode("utf-8") == path.read_bytes()
