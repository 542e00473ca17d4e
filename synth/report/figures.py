"""Figures of ideal cubes: moment-0 maps (matplotlib, Agg backend, PNG)."""

import numpy as np

__all__ = ["moment0_figure", "offsets_extent", "ideal_vs_observed_figure"]


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
    fig, ax = plt.subplots(figsize=(5.2, 4.4), dpi=110)
    im = ax.imshow(np.asarray(mom0_k_kms), origin="lower", extent=offsets_extent(cube),
                   cmap="magma", interpolation="nearest")
    ax.set_xlabel("RA offset (arcsec)")
    ax.set_ylabel("Dec offset (arcsec)")
    ax.set_title(f"{title}: integrated intensity")
    fig.colorbar(im, ax=ax, label="∫T_B dv (K km/s)")
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png")
    plt.close(fig)
    return path


def _mom0(cube):
    data = np.nan_to_num(np.asarray(cube.unmasked_data[:].value, dtype=np.float64))
    vel = cube.with_spectral_unit("km/s", velocity_convention="radio").spectral_axis.value
    dv = abs(vel[1] - vel[0]) if vel.size > 1 else 1.0
    return data.sum(axis=0) * dv


def ideal_vs_observed_figure(ideal, observed, title, path):
    """PNG: ideal and observed integrated intensity side by side, each in its own unit."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from ..fitsio import atomic_path
    fig, axes = plt.subplots(1, 2, figsize=(10, 4.3), dpi=100)
    for ax, cube, label in ((axes[0], ideal, "ideal"), (axes[1], observed, "observed")):
        im = ax.imshow(_mom0(cube), origin="lower", extent=offsets_extent(cube), cmap="magma",
                       interpolation="nearest")
        ax.set_xlabel("RA offset (arcsec)")
        ax.set_ylabel("Dec offset (arcsec)")
        unit = cube.unit.to_string()
        ax.set_title(f"{label}")
        fig.colorbar(im, ax=ax, label=f"∫ dv ({unit} km/s)")
        beam = getattr(cube, "beam", None) if label == "observed" else None
        if beam is not None:
            from matplotlib.patches import Ellipse
            ext = offsets_extent(cube)
            bx, by = ext[0] - 0.1 * (ext[0] - ext[1]), ext[2] + 0.1 * (ext[3] - ext[2])
            ax.add_patch(Ellipse((bx, by), beam.minor.to_value("arcsec"),
                                 beam.major.to_value("arcsec"), angle=beam.pa.to_value("deg"),
                                 facecolor="none", edgecolor="cyan", lw=1.5))
    fig.suptitle(title)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png")
    plt.close(fig)
    return path
