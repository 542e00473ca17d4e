"""Figures of ideal cubes: moment-0 maps (matplotlib, Agg backend, PNG)."""

import numpy as np

__all__ = ["moment0_figure", "offsets_extent", "reference_extent", "layout_figure"]


def offsets_extent(cube):
    """imshow extent (arcsec offsets from the map centre) of a cube's celestial axes."""
    ny, nx = cube.shape[1:]
    dx = abs(cube.wcs.wcs.cdelt[0]) * 3600
    dy = abs(cube.wcs.wcs.cdelt[1]) * 3600
    return [nx * dx / 2, -nx * dx / 2, -ny * dy / 2, ny * dy / 2]


def moment0_figure(mom0_k_kms, cube, title, path):
    """Write a PNG of an integrated-intensity map (K km/s) with offsets in arcsec."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from ..fitsio import atomic_path
    fig, ax = plt.subplots(figsize=(5.2, 4.4), dpi=110,
                           gridspec_kw=dict(left=0.16, right=0.98, bottom=0.12, top=0.92))
    im = ax.imshow(np.asarray(mom0_k_kms), origin="lower", extent=offsets_extent(cube),
                   cmap="magma", interpolation="nearest")
    ax.set_xlabel("RA offset (arcsec)")
    ax.set_ylabel("Dec offset (arcsec)")
    ax.set_title(f"{title}: integrated intensity")
    fig.colorbar(im, ax=ax, label="∫T_B dv (K km/s)")
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png")
    plt.close(fig)
    return path



def reference_extent(cube):
    """imshow extent (arcsec east / north of the WCS reference point, the [sky] position)."""
    ny, nx = cube.shape[1:]
    pix = abs(cube.wcs.wcs.cdelt[0]) * 3600
    x0, y0 = cube.wcs.wcs.crpix[0] - 1.0, cube.wcs.wcs.crpix[1] - 1.0
    return [-(-0.5 - x0) * pix, -(nx - 0.5 - x0) * pix, (-0.5 - y0) * pix, (ny - 0.5 - y0) * pix]


def layout_figure(omap, sky_or_title, title_or_path, path=None):
    """Write a PNG of a setup's map layout over the model's moment-0 map: the mapped area
    (dashed), an array's pointings with their primary-beam half-power circles and the contour
    where the mosaic's response is 1/2, or a dish's Nyquist positions and guard band.

    ``layout_figure(observed_map, title, path)`` draws an ObservedMap over its own grid;
    ``layout_figure(layout, sky_cube, title, path)`` a planned MapLayout over a model cube
    (no response contour)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.patches import Circle, Rectangle
    from ..fitsio import atomic_path
    if path is None:            # (observed map, title, path)
        lay, sky, response = omap.layout, omap.sky, omap.response
        title, path = sky_or_title, title_or_path
    else:                       # (layout, sky cube, title, path)
        lay, sky, response, title = omap, sky_or_title, None, title_or_path
    import astropy.units as u
    v = sky.with_spectral_unit(u.km / u.s, velocity_convention="radio").spectral_axis.value
    dv = abs(float(v[1] - v[0])) if v.size > 1 else 1.0
    mom0 = np.nansum(np.asarray(sky.unmasked_data[:].value), axis=0) * dv
    ext = reference_extent(sky)
    fig, ax = plt.subplots(figsize=(5.6, 4.8), dpi=100,
                           gridspec_kw=dict(left=0.15, right=0.97, bottom=0.11, top=0.9))
    im = ax.imshow(mom0, origin="lower", extent=ext, cmap="Greys", interpolation="nearest")
    fig.colorbar(im, ax=ax, label="model ∫T_B dv (K km/s)")
    (cx, cy), (w, h) = lay.center, lay.size
    ax.add_patch(Rectangle((cx - w / 2, cy - h / 2), w, h, fill=False, ls="--", color="C0",
                           label="mapped area"))
    p = lay.pointings
    if lay.kind == "dish":
        g = lay.guard
        ax.add_patch(Rectangle((cx - w / 2 - g, cy - h / 2 - g), w + 2 * g, h + 2 * g,
                               fill=False, ls=":", color="C1", label="guard band"))
        ax.plot(p[:, 0], p[:, 1], ".", ms=2, color="C1", label=f"{len(p)} map positions")
    else:
        for e, n in p:
            ax.add_patch(Circle((e, n), lay.field_fwhm / 2, fill=False, color="C3", lw=0.8))
        ax.plot(p[:, 0], p[:, 1], "+", color="C3",
                label=f"{len(p)} pointing(s), half-power circles")
        if response is not None and np.nanmax(response) > 0.5:
            ax.contour(response, levels=[0.5], extent=ext, origin="lower",
                       colors="C2", linewidths=0.8)
    grid = (lay.center, lay.grid_size)
    ax.set_xlim(max(ext[0], grid[0][0] + grid[1][0] / 2), min(ext[1], grid[0][0] - grid[1][0] / 2))
    ax.set_ylim(min(ext[2], grid[0][1] - grid[1][1] / 2), max(ext[3], grid[0][1] + grid[1][1] / 2))
    ax.set_aspect("equal")
    ax.set_xlabel("RA offset (arcsec, east to the left)")
    ax.set_ylabel("Dec offset (arcsec)")
    import textwrap
    ax.set_title("\n".join(textwrap.wrap(title, 70)), fontsize=8)
    ax.legend(fontsize=7, loc="upper right")
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png")
    plt.close(fig)
    return path
