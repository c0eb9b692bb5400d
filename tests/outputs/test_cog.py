"""Tests of slicer.outputs.cog: TIFF blocks and the copy of a GeoTIFF into the COG layout."""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.outputs import cog


@settings(max_examples=60, deadline=None)
@given(sixteens=st.integers(1, 256))
def test_blocks_divide_the_tile(sixteens):
    tile = 16 * sixteens
    block = cog.tile_block(tile)
    # TIFF 6.0 section 15: TileWidth and TileLength must be multiples of 16; ours also divide
    # the tile, and are the largest such edge up to 512.
    assert block % 16 == 0 and tile % block == 0 and block <= 512
    assert not any(tile % b == 0 for b in range(block + 16, 513, 16))


def _base(ny, nx):
    return {"width": nx, "height": ny, "count": 1, "dtype": "float32", "crs": "EPSG:32633",
            "transform": Affine(0.05, 0, 500000, 0, -0.05, 4649776), "nodata": np.nan}


@settings(max_examples=60, deadline=None)
@given(ny=st.integers(1, 5000), nx=st.integers(1, 5000), sixteens=st.integers(1, 64))
def test_cog_blocks(ny, nx, sixteens):
    size = cog.cog_profile(_base(ny, nx), tile=16 * sixteens)["blocksize"]
    # TIFF 6.0 section 15: multiples of 16; 512 is the COG driver's default, our largest.
    assert size % 16 == 0 and size <= 512
    # a raster smaller than a block is one block, its larger side rounded up to 16
    if size > max(ny, nx):
        assert size == 16 * -(-max(ny, nx) // 16)


def test_copy_keeps_pixels_tags_and_lays_out_a_cog(tmp_path):
    from rio_cogeo.cogeo import cog_validate

    rng = np.random.default_rng(3)
    values = rng.random((700, 600)).astype(np.float32)
    values[100:300, 50:90] = np.nan
    staged, final = tmp_path / "staged.tif", tmp_path / "final.tif"
    with rasterio.open(staged, "w", **cog.staging_profile(_base(700, 600))) as dst:
        dst.update_tags(DEPTH_TOP="0.3")
        dst.set_band_description(1, "depth 0.300-0.400 m")
        dst.write(values, 1)
    cog.copy_to_cog(staged, final, cog.cog_profile(_base(700, 600)))
    # rio-cogeo's validator: a COG, no errors, no warnings
    assert cog_validate(str(final)) == (True, [], [])
    with rasterio.open(final) as src:
        np.testing.assert_array_equal(src.read(1).view(np.uint32), values.view(np.uint32))
        assert src.tags()["DEPTH_TOP"] == "0.3"
        assert src.descriptions == ("depth 0.300-0.400 m",)
        # 700 -> 350 -> 175, which fits a 256 block: two levels (common practice)
        assert src.overviews(1) == [2, 4]
        assert src.profile["compress"] == "deflate"


@pytest.mark.parametrize("ny, nx", [(5000, 1), (1, 5000), (257, 1), (5000, 2), (5000, 3)])
def test_thin_slices_are_valid_cogs(tmp_path, ny, nx):
    # A slice one or a few cells across (a lone line gridded with a coarse cell): rio-cogeo's
    # validator refuses overview levels that cannot reduce the short side (decimation 1).
    from rio_cogeo.cogeo import cog_validate

    values = np.random.default_rng(ny + nx).random((ny, nx)).astype(np.float32)
    values[: ny // 2, : nx // 2] = np.nan
    for way in ("whole", "streamed"):
        path = tmp_path / f"{way}.tif"
        if way == "whole":
            cog.write_cog(path, values, cog.cog_profile(_base(ny, nx)))
        else:
            staged = tmp_path / "staged.tif"
            with rasterio.open(staged, "w", **cog.staging_profile(_base(ny, nx))) as dst:
                dst.write(values, 1)
            cog.copy_to_cog(staged, path, cog.cog_profile(_base(ny, nx)))
        valid, errors, _warnings = cog_validate(str(path))
        assert valid and errors == []
        with rasterio.open(path) as src:
            np.testing.assert_array_equal(src.read(1), values)
