"""Small invented layers for the geo tests (invented data: property tests only)."""

from __future__ import annotations

import numpy as np
import rasterio

UTM30 = "EPSG:32630"


def write_layer(path, values, *, transform=(100.0, 0.0, 500_000.0, 0.0, -100.0, 6_000_000.0),
                crs=UTM30, nodata=-9999.0, dtype="float32", descriptions=None):
    """Write one GeoTIFF (one band, or one per first axis of a 3-D array); NaN becomes nodata."""
    values = np.asarray(values, dtype=np.float64)
    bands = values[None] if values.ndim == 2 else values
    profile = {"driver": "GTiff", "width": bands.shape[2], "height": bands.shape[1],
               "count": bands.shape[0], "dtype": dtype, "crs": crs,
               "transform": rasterio.Affine(*transform), "nodata": nodata}
    with rasterio.open(path, "w", **profile) as out:
        stored = np.where(np.isnan(bands), nodata if nodata is not None else np.nan, bands)
        out.write(stored.astype(dtype))
        for i, text in enumerate(descriptions or (), start=1):
            out.set_band_description(i, text)
    return path


def write_layers(folder, arrays: dict, **kwargs):
    folder.mkdir(parents=True, exist_ok=True)
    for name, values in arrays.items():
        write_layer(folder / f"{name}.tif", values, **kwargs)
    return folder


def smooth(rng, shape, scale=3.0):
    """A smooth invented field, mean 0 and SD 1."""
    noise = rng.standard_normal(shape)
    ky = np.fft.fftfreq(shape[0])[:, None]
    kx = np.fft.fftfreq(shape[1])[None, :]
    field = np.real(np.fft.ifft2(np.fft.fft2(noise)
                                 * np.exp(-2 * (np.pi * scale) ** 2 * (kx ** 2 + ky ** 2))))
    return (field - field.mean()) / field.std()
