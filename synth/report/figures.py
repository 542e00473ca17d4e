"""Figures of ideal cubes: moment-0 maps (matplotlib, Agg backend, PNG)."""

import numpy as np

__all__ = ["moment0_figure", "offsets_extent"]


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

