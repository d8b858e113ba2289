"""GDSII read back with gdstk; previews; the [export] design-file section."""

from __future__ import annotations

import gdstk
import numpy as np
import pytest
import shapely
from test_export_helpers import comb_layout

from chipflow.errors import ExportError, SpecError
from chipflow.export.gds import (
    NOTES_GDS_LAYER,
    OUTLINE_GDS_LAYER,
    PORT_GDS_LAYER,
    GdsOptions,
    write_gds,
)
from chipflow.export.preview import plot_layout, write_preview, write_previews
from chipflow.spec.export import read_export
from chipflow.spec.reader import parse_design_text

LAYOUT = comb_layout()


def _shoelace(points: np.ndarray) -> float:
    x, y = points[:, 0], points[:, 1]
    return 0.5 * abs(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1)))


def _read(path):
    lib = gdstk.read_gds(str(path))
    assert len(lib.cells) == 1  # one cell
    (cell,) = lib.cells
    return lib, cell


@pytest.mark.parametrize("limit", [8190, 199])
def test_gds_read_back_layers_area_and_vertex_limit(tmp_path, limit):
    path = tmp_path / "chip.gds"
    write_gds(LAYOUT, path, GdsOptions(vertex_limit=limit))
    lib, cell = _read(path)
    assert lib.unit == pytest.approx(1e-6) and lib.precision == pytest.approx(1e-9)
    mask = {p.layer for p in cell.polygons} - {OUTLINE_GDS_LAYER, PORT_GDS_LAYER}
    assert mask == {1, 2}
    for level in (1, 2):
        polys = [p for p in cell.polygons if p.layer == level]
        assert all(len(p.points) <= limit for p in polys)
        # independent area: shoelace of the stored points (um^2 -> m^2)
        area = sum(_shoelace(p.points) for p in polys) * 1e-12
        assert area == pytest.approx(LAYOUT.layers[level - 1].geometry.area, rel=1e-9)
    labels = " ".join(lb.text for lb in cell.labels if lb.layer == NOTES_GDS_LAYER)
    assert "units um" in labels and "polarity channels" in labels


def test_gds_fractures_a_polygon_over_the_limit(tmp_path):
    # 60 bed channels: the merged bed outline has far more than 199 vertices
    layout = comb_layout(n_bed=60, bed_width=40e-6, wall=40e-6)
    write_gds(layout, tmp_path / "big.gds", GdsOptions(vertex_limit=199))
    _, cell = _read(tmp_path / "big.gds")
    bed = [p for p in cell.polygons if p.layer == 1]
    assert len(bed) > 1 and max(len(p.points) for p in bed) <= 199
    area = sum(_shoelace(p.points) for p in bed) * 1e-12
    assert area == pytest.approx(layout.layers[0].geometry.area, rel=1e-9)


def test_gds_mirror_and_inverse(tmp_path):
    write_gds(LAYOUT, tmp_path / "m.gds", GdsOptions(mirror=True, polarity="inverse"))
    _, cell = _read(tmp_path / "m.gds")
    minx, _, maxx, _ = LAYOUT.outline.bounds
    for level in (1, 2):
        polys = [p for p in cell.polygons if p.layer == level]
        area = sum(_shoelace(p.points) for p in polys) * 1e-12
        channels = LAYOUT.layers[level - 1].geometry
        assert area == pytest.approx(LAYOUT.outline.area - channels.area, rel=1e-9)
    # the mirrored inverse of the feeders leaves the reflected feeders uncovered
    feeders = LAYOUT.layers[1].geometry
    reflected = shapely.transform(
        feeders, lambda c: np.column_stack([minx + maxx - c[:, 0], c[:, 1]])
    )
    probe = reflected.representative_point()
    inside = [p for p in cell.polygons if p.layer == 2 and p.contain(probe.x * 1e6, probe.y * 1e6)]
    assert not inside


def test_gds_two_writes_are_byte_identical(tmp_path):
    write_gds(LAYOUT, tmp_path / "a.gds")
    write_gds(LAYOUT, tmp_path / "b.gds")
    assert (tmp_path / "a.gds").read_bytes() == (tmp_path / "b.gds").read_bytes()


def test_gds_options_are_checked():
    with pytest.raises(SpecError, match="8190"):
        GdsOptions(vertex_limit=10000)


def test_plot_layout_returns_what_it_drew():
    values = np.linspace(0.1, 1.2, len(LAYOUT.channels.width))
    plot = plot_layout(LAYOUT, values=values)
    assert len(plot.layer_patches) == 2
    assert plot.colorbar is not None
    assert plot.colorbar.ax.get_ylabel() == "floor wall shear [Pa]"
    assert plot.channel_collection.get_array().min() == pytest.approx(0.1)
    # a 20 mm chip gets a 2 mm scale bar (largest 1-2-5 step not above a fifth of the width)
    assert plot.scale_bar_length == pytest.approx(2e-3)
    texts = {t.get_text() for t in plot.ax.texts}
    assert {"inlet", "outlet", "2 mm"} <= texts
    plain = plot_layout(LAYOUT)
    assert plain.colorbar is None and plain.channel_collection is None


def test_plot_layout_rejects_values_of_the_wrong_length():
    with pytest.raises(ExportError, match="one value per channel"):
        plot_layout(LAYOUT, values=np.ones(3))


@pytest.mark.parametrize("suffix", ["svg", "png"])
def test_previews_are_byte_identical(tmp_path, suffix):
    values = np.arange(len(LAYOUT.channels.width), dtype=float)
    a, b = tmp_path / f"a.{suffix}", tmp_path / f"b.{suffix}"
    write_preview(LAYOUT, a, values=values)
    write_preview(LAYOUT, b, values=values)
    assert a.read_bytes() == b.read_bytes()
    data = a.read_bytes()
    if suffix == "png":
        assert data[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification)
        assert b"matplotlib version" not in data
    else:
        assert b"<svg" in data and b"<dc:date>" not in data


def test_preview_suffix_is_checked(tmp_path):
    with pytest.raises(ExportError, match=".svg or .png"):
        write_preview(LAYOUT, tmp_path / "chip.pdf")


def test_export_section_reads_every_key():
    top = parse_design_text(
        "[export]\n"
        'units = "mm"\ndxf_version = "R12"\nholes = "keyhole"\npolarity = "inverse"\n'
        "mirror = true\ngds_vertex_limit = 199\n",
        "demo.toml",
    )
    s = read_export(top, design_hash="sha256:00")
    assert (s.dxf.units, s.dxf.version, s.dxf.holes, s.dxf.polarity, s.dxf.mirror) == (
        "mm",
        "R12",
        "keyhole",
        "inverse",
        True,
    )
    assert (s.gds.vertex_limit, s.gds.polarity, s.gds.mirror) == (199, "inverse", True)
    assert s.dxf.design_hash == s.gds.design_hash == "sha256:00"
    defaults = read_export(parse_design_text("", "demo.toml"))
    assert (defaults.dxf.units, defaults.dxf.version, defaults.dxf.holes) == (
        "um",
        "R2000",
        "split",
    )
    assert defaults.gds.vertex_limit == 8190


@pytest.mark.parametrize(
    "text, match",
    [
        ('polarty = "inverse"', "demo.toml: export.polarty: unknown key; did you mean 'polarity'"),
        ('dxf_version = "R13"', "demo.toml: export.dxf_version: unknown value 'R13'"),
        ("gds_vertex_limit = 9000", "export.gds_vertex_limit: must be at most"),
        ('mirror = "yes"', "export.mirror: expected true or false"),
    ],
)
def test_export_section_errors_say_where(text, match):
    with pytest.raises(SpecError, match=match):
        read_export(parse_design_text("[export]\n" + text, "demo.toml"))


def test_previews_drawn_once_match_single_previews(tmp_path):
    # one figure saved as SVG and PNG gives the bytes of two separate single-file previews
    values = np.arange(len(LAYOUT.channels.width), dtype=float)
    together = write_previews(LAYOUT, [tmp_path / "t.svg", tmp_path / "t.png"], values=values)
    assert [p.name for p in together] == ["t.svg", "t.png"]
    for suffix in ("svg", "png"):
        alone = write_preview(LAYOUT, tmp_path / f"alone.{suffix}", values=values)
        assert alone.read_bytes() == (tmp_path / f"t.{suffix}").read_bytes()
    with pytest.raises(ExportError, match=".svg or .png"):
        write_previews(LAYOUT, [tmp_path / "ok.svg", tmp_path / "chip.pdf"])
    assert not (tmp_path / "ok.svg").exists()  # suffixes are checked before anything is written


def test_dense_previews_embed_the_shapes_as_one_image(tmp_path):
    values = np.linspace(0.1, 1.2, len(LAYOUT.channels.width))
    vector = plot_layout(LAYOUT, values=values)
    assert not any(p.get_rasterized() for p in vector.layer_patches)
    assert not vector.channel_collection.get_rasterized()
    dense = plot_layout(LAYOUT, values=values, raster_above=0)
    assert all(p.get_rasterized() for p in dense.layer_patches)
    assert dense.channel_collection.get_rasterized()
    # written with the shapes as an image: still byte-identical from run to run, and the
    # SVG then holds them as an embedded PNG (data URI of an <image>, SVG 1.1 specification)
    paths = [tmp_path / "a.svg", tmp_path / "b.svg"]
    for path in paths:
        write_previews(LAYOUT, [path], values=values, raster_above=0)
    dense_svg = paths[0].read_bytes()
    assert dense_svg == paths[1].read_bytes()
    assert b"<image" in dense_svg and b"data:image/png;base64," in dense_svg
    write_previews(LAYOUT, [tmp_path / "v.svg"], values=values)
    # the colour bar is an image in both; the dense one adds the image of the shapes
    assert dense_svg.count(b"<image") == (tmp_path / "v.svg").read_bytes().count(b"<image") + 1


@pytest.mark.parametrize("holes", ["split", "keyhole"])
def test_gds_carries_the_same_shapes_as_the_dxf(tmp_path, holes):
    # reference: the DXF file of the same layout and options, read back with ezdxf
    import ezdxf

    from chipflow.export.dxf import DxfOptions, write_dxf

    layout = comb_layout(n_bed=6)
    write_gds(layout, tmp_path / "c.gds", GdsOptions(holes=holes))
    write_dxf(layout, tmp_path / "c.dxf", DxfOptions(holes=holes))
    _, cell = _read(tmp_path / "c.gds")
    doc = ezdxf.readfile(tmp_path / "c.dxf")
    for level, mask in enumerate(layout.layers, start=1):
        gds = sorted(np.round(p.points, 6).tolist() for p in cell.polygons if p.layer == level)
        dxf = sorted(
            np.round(np.array(e.get_points("xy")), 6).tolist()
            for e in doc.modelspace().query(f'LWPOLYLINE[layer=="{mask.name}"]')
        )
        assert gds == dxf
        if holes == "split":  # hole-free simple pieces, as many as the DXF's
            assert all(shapely.Polygon(p).is_valid for p in gds)


def test_gds_hole_option_is_checked():
    with pytest.raises(SpecError, match="holes"):
        GdsOptions(holes="bridge")
    settings = read_export(parse_design_text('[export]\nholes = "keyhole"'))
    assert settings.gds.holes == settings.dxf.holes == "keyhole"
