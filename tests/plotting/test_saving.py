"""Saving figures: png, pdf or svg at a chosen resolution, an unknown format or resolution
refused before anything is written, and talk-sized pictures by default."""

from __future__ import annotations

import struct

import pytest

from sim.errors import UsageError
from sim.plotting import DPI, FORMATS, result_figures, save
from sim.plotting.style import FIGSIZE, figure_path, new_figure, stamp


def png_size(path) -> tuple[int, int]:
    """Width and height of a PNG from its IHDR chunk (bytes 16-24, big-endian; W3C PNG
    specification, section 11.2.2)."""
    return struct.unpack(">II", path.read_bytes()[16:24])


def one_figure():
    fig, ax = new_figure()
    ax.plot([0, 1], [0, 1])
    stamp(fig)
    return fig


#: the first bytes of each format: PNG signature (W3C PNG spec. 5.2), "%PDF-" (ISO 32000-1,
#: 7.5.2), an XML document whose root is <svg> (W3C SVG 1.1)
SIGNATURES = {"png": b"\x89PNG\r\n\x1a\n", "pdf": b"%PDF-", "svg": b"<?xml"}


@pytest.mark.parametrize("fmt", FORMATS)
def test_each_format_writes_its_own_file(tmp_path, fmt):
    written = save(one_figure(), tmp_path / "decay.png", fmt=fmt)
    assert written == tmp_path / f"decay.{fmt}" and written.is_file()
    data = written.read_bytes()
    assert data.startswith(SIGNATURES[fmt])
    if fmt == "svg":
        assert b"<svg" in data
    assert sorted(p.name for p in tmp_path.iterdir()) == [f"decay.{fmt}"]  # no temporary left


def test_default_is_a_talk_sized_png(tmp_path):
    written = save(one_figure(), tmp_path / "decay")
    assert written.suffix == ".png"
    assert png_size(written) == (round(FIGSIZE[0] * DPI), round(FIGSIZE[1] * DPI))
    assert FIGSIZE[0] * DPI >= 900  # wide enough for a slide


def test_dpi_sets_the_pixels(tmp_path):
    assert png_size(save(one_figure(), tmp_path / "x.png", dpi=100)) == (640, 420)


@pytest.mark.parametrize("fmt", ["jpg", "eps", ""])
def test_unknown_format_is_refused_and_nothing_written(tmp_path, fmt):
    with pytest.raises(UsageError, match="allowed: png, pdf, svg"):
        save(one_figure(), tmp_path / "x.png", fmt=fmt)
    assert list(tmp_path.iterdir()) == []


def test_unknown_suffix_is_refused(tmp_path):
    with pytest.raises(UsageError, match="'jpg'"):
        save(one_figure(), tmp_path / "x.jpg")


@pytest.mark.parametrize("dpi", [0, -5, 10_000, "many"])
def test_resolution_out_of_range_is_refused(tmp_path, dpi):
    with pytest.raises(UsageError, match="--dpi"):
        save(one_figure(), tmp_path / "x.png", dpi=dpi)
    assert list(tmp_path.iterdir()) == []


def test_figure_path_sets_the_suffix():
    assert figure_path("out/rates.png", "pdf").name == "rates.pdf"
    assert figure_path("out/rates", "svg").name == "rates.svg"
    assert figure_path("out/rates.v2", "png").name == "rates.v2.png"
    assert figure_path("out/rates.PDF").name == "rates.PDF"


def test_run_figures_in_svg(results, tmp_path):
    names = result_figures(results["perturbative-3d"], tmp_path, fmt="svg", dpi=80)
    assert names and all(n.endswith(".svg") for n in names)
    assert sorted(names) == sorted(p.name for p in tmp_path.iterdir())


def test_run_figures_refuse_a_format_before_drawing(results, tmp_path):
    with pytest.raises(UsageError, match="--format 'gif'"):
        result_figures(results["perturbative-3d"], tmp_path, fmt="gif")
    assert list(tmp_path.iterdir()) == []
