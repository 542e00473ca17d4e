"""Radiative transfer and LTE against analytic solutions (sources named per test)."""

import numpy as np
import pytest
import astropy.units as u
import astropy.constants as const
from scipy import integrate
from scipy.special import ndtr

import synth
from synth.radiation import T_CMB_K
from synth.transfer.kernel import cumulative_profile
from synth.transfer.synthesize import synthesize_products

H, K, C = const.h.cgs.value, const.k_B.cgs.value, const.c.cgs.value
CO10 = synth.Line("CO", "1-0")


def uniform(shape, n_cm3, t_k, vz_kms=None, cell_pc=0.01, sigma_turb_kms=0.0):
    vel = np.zeros((3,) + shape)
    if vz_kms is not None:
        vel[2] = vz_kms
    return synth.Snapshot(n_h2=np.full(shape, n_cm3) * u.cm**-3, t_kin=np.full(shape, t_k) * u.K,
                          velocity=vel * u.km / u.s, cell_size=cell_pc * u.pc,
                          sigma_turb=sigma_turb_kms * u.km / u.s)


def jtemp(nu_hz, t_k):
    """J(T) = (h nu / k) / (exp(h nu / k T) - 1) (Mangum & Shirley 2015, eq. 24)."""
    return (H * nu_hz / K) / np.expm1(H * nu_hz / (K * t_k))


def boltzmann_upper_fraction(line, t_k):
    """g_u exp(-E_u/kT) / Q with Q summed explicitly over the molecule's levels."""
    mol = line.molecule
    q = np.sum(mol.g * np.exp(-mol.energy_k / t_k))
    return mol.g[line.upper] * np.exp(-mol.energy_k[line.upper] / t_k) / q


def test_optically_thin_slab_integrated_intensity():
    """Thin LTE slab, microturbulence only: ∫T_B dv = (h c^3 A N_u / (8 pi k nu^2))
    [1 - (e^{h nu/kT} - 1)/(e^{h nu/kT_bg} - 1)] (Mangum & Shirley 2015, PASP 127, 266,
    eqs. 30 and 80 in the thin limit) within 0.5 %."""
    t, n, x, nz, cell = 20.0, 50.0, 1e-9, 40, 0.01
    snap = uniform((2, 3, nz), n, t, cell_pc=cell, sigma_turb_kms=0.3)
    cube = synth.synthesize(snap, CO10, x, distance=1 * u.kpc, channel_width=0.05 * u.km / u.s,
                            velocity_range=(-3, 3) * u.km / u.s)
    got = cube.unmasked_data[:, 1, 1].value.sum() * 0.05  # K km/s
    n_u = n * x * nz * cell * u.pc.to(u.cm) * boltzmann_upper_fraction(CO10, t)
    nu, a = CO10.freq_hz, CO10.a_ul_s
    x0 = H * nu / K
    ref = H * C**3 * a * n_u / (8 * np.pi * K * nu**2) * (1 - np.expm1(x0 / t) / np.expm1(x0 / T_CMB_K))
    assert got == pytest.approx(ref / 1e5, rel=5e-3)


def test_optically_thick_slab_line_centre():
    """Thick slab: line-centre T_B -> J(T_ex) - J(T_bg) (Mangum & Shirley 2015, eq. 28 with
    tau >> 1) within 0.5 %."""
    t = 25.0
    snap = uniform((1, 1, 30), 1e4, t, cell_pc=0.05, sigma_turb_kms=0.2)
    res = synthesize_products(snap, CO10, 1e-4, distance=1 * u.kpc,
                              channel_width=0.02 * u.km / u.s,
                              velocity_range=(-0.01, 0.01) * u.km / u.s, products=("tau",))
    assert res.stats["tau_max"] > 50
    got = res.cube.unmasked_data[0, 0, 0].value
    ref = jtemp(CO10.freq_hz, t) - jtemp(CO10.freq_hz, T_CMB_K)
    assert got == pytest.approx(ref, rel=5e-3)


@pytest.mark.parametrize("cell_over_thermal", [0.1, 2.0])
def test_hubble_flow_sobolev_plateau(cell_over_thermal):
    """Uniform medium in a Hubble flow v = K r (LTE): the flat part of the spectrum equals
    (J(T) - J(T_bg))(1 - e^{-tau_S}), tau_S = (c^3 A / (8 pi nu^3 K)) n_u (e^{h nu/kT} - 1)
    (Sobolev 1960; Castor 1970, MNRAS 149, 111) within 3 %, for K*cell = 0.1 and 2 thermal
    FWHM per cell."""
    t, cell_pc = 20.0, 0.01
    sigma_th = np.sqrt(K * t / (28.0 * const.u.cgs.value)) / 1e5
    dv_cell = cell_over_thermal * 2.3548 * sigma_th            # km/s per cell
    nz = int(round(8.0 / dv_cell)) if cell_over_thermal < 1 else 200
    vz = dv_cell * (np.arange(nz) - (nz - 1) / 2)
    grad_s = dv_cell * 1e5 / (cell_pc * u.pc.to(u.cm))          # K in s^-1
    n_u_target_tau = 1.0
    nu, a = CO10.freq_hz, CO10.a_ul_s
    n_u = n_u_target_tau * grad_s / (C**3 * a / (8 * np.pi * nu**3) * np.expm1(H * nu / (K * t)))
    n_mol = n_u / boltzmann_upper_fraction(CO10, t)
    snap = uniform((1, 1, nz), n_mol / 1e-4, t, vz_kms=np.broadcast_to(vz, (1, 1, nz)),
                   cell_pc=cell_pc)
    cube = synth.synthesize(snap, CO10, 1e-4, distance=1 * u.kpc,
                            channel_width=0.01 * u.km / u.s,
                            velocity_range=(-0.5, 0.5) * u.km / u.s)
    spec = cube.unmasked_data[:, 0, 0].value
    tau_s = (C**3 * a / (8 * np.pi * nu**3 * grad_s)) * n_u * np.expm1(H * nu / (K * t))
    ref = (jtemp(nu, t) - jtemp(nu, T_CMB_K)) * (1 - np.exp(-tau_s))
    assert tau_s == pytest.approx(1.0, rel=1e-6)
    np.testing.assert_allclose(spec, ref, rtol=0.03)


@pytest.mark.parametrize("delta", [0.0, 1e-5, 0.01, 0.3, 2.0])
def test_channel_integrated_profile_matches_quadrature(delta):
    """F(e): the Gaussian CDF averaged over a uniform centroid spread of width delta, against
    scipy.special.ndtr integrated with scipy.integrate.quad, to 1e-8 absolute."""
    e = np.linspace(-3, 3, 121)
    got = cumulative_profile(e, 0.1, 0.4, delta)
    if delta == 0.0:
        ref = ndtr((e - 0.1) / 0.4)
    else:
        ref = [integrate.quad(lambda s, x=x: ndtr((x - 0.1 - s) / 0.4), -delta / 2, delta / 2,
                              epsabs=1e-14)[0] / delta for x in e]
    np.testing.assert_allclose(got, ref, atol=1e-8)


def test_fast_flow_leaves_no_gaps_and_conserves_flux():
    """Invariant: a thin column whose velocity jumps by 5 sigma per cell still gives a smooth
    spectrum (no empty channels inside the velocity span) and the same ∫T dv as a static
    column (optically thin emission is independent of the velocity field)."""
    nz = 20
    vz = np.broadcast_to(1.0 * (np.arange(nz) - nz / 2), (1, 1, nz))
    fast = uniform((1, 1, nz), 30.0, 15.0, vz_kms=vz, cell_pc=0.01, sigma_turb_kms=0.05)
    static = uniform((1, 1, nz), 30.0, 15.0, cell_pc=0.01, sigma_turb_kms=0.05)
    kw = dict(distance=1 * u.kpc, channel_width=0.05 * u.km / u.s,
              velocity_range=(-15, 15) * u.km / u.s)
    s_fast = synth.synthesize(fast, CO10, 1e-9, **kw).unmasked_data[:, 0, 0].value
    s_static = synth.synthesize(static, CO10, 1e-9, **kw).unmasked_data[:, 0, 0].value
    assert s_fast.sum() == pytest.approx(s_static.sum(), rel=1e-3)
    inside = s_fast[(np.arange(s_fast.size) > 110) & (np.arange(s_fast.size) < 470)]
    assert inside.min() > 0.5 * inside.mean()


def test_channel_width_conserves_integrated_intensity():
    """Invariant: ∫T dv of optically thin emission does not depend on the channel width."""
    snap = synth.demo_cloud(cells=16, seed=4)
    kw = dict(distance=2 * u.kpc, velocity_range=(-12, 12) * u.km / u.s)
    fine = synth.synthesize(snap, CO10, 1e-10, channel_width=0.1 * u.km / u.s, **kw)
    coarse = synth.synthesize(snap, CO10, 1e-10, channel_width=0.8 * u.km / u.s, **kw)
    a = fine.unmasked_data[:].value.sum(axis=0) * 0.1
    b = coarse.unmasked_data[:].value.sum(axis=0) * 0.8
    np.testing.assert_allclose(b, a, rtol=1e-4)


def test_axis_view_equals_transposed_snapshot():
    """Line of sight "x" is the snapshot rotated so that x becomes depth: the cube equals the
    one from an explicitly permuted snapshot (docs/snapshot.md view table)."""
    snap = synth.demo_cloud(cells=12, seed=2)
    kw = dict(distance=2 * u.kpc, channel_width=0.5 * u.km / u.s,
              velocity_range=(-15, 15) * u.km / u.s)
    via_view = synth.synthesize(snap, CO10, 1e-6, line_of_sight="x", **kw)
    v = snap.view("x")
    explicit = synth.synthesize(v, CO10, 1e-6, **kw)
    np.testing.assert_array_equal(via_view.unmasked_data[:].value, explicit.unmasked_data[:].value)
    assert not np.allclose(via_view.unmasked_data[:].value,
                           synth.synthesize(snap, CO10, 1e-6, **kw).unmasked_data[:].value)


def test_pixel_scale_and_wcs():
    """Pixel angle = cell / distance (small angle); VRAD axis with RESTFRQ; centre at the
    requested position; CDELT1 < 0 (FITS WCS Paper II convention, Calabretta & Greisen 2002)."""
    snap = uniform((4, 6, 3), 100.0, 20.0, cell_pc=0.02)
    cube = synth.synthesize(snap, CO10, 1e-6, distance=3 * u.kpc,
                            channel_width=0.2 * u.km / u.s, velocity_range=(-2, 2) * u.km / u.s,
                            position=(10 * u.deg, 20 * u.deg))
    pix_arcsec = (0.02 / 3000.0) * u.rad.to(u.arcsec)
    assert cube.shape == (20, 6, 4)
    assert cube.wcs.wcs.cdelt[0] * 3600 == pytest.approx(-pix_arcsec, rel=1e-12)
    assert cube.wcs.wcs.restfrq == pytest.approx(CO10.freq_hz, rel=1e-12)
    assert cube.spectral_axis[0].to_value(u.km / u.s) == pytest.approx(-1.9, abs=1e-9)
    ra, dec = cube.wcs.celestial.wcs_pix2world([[1.5, 2.5]], 0)[0]
    assert (ra, dec) == pytest.approx((10.0, 20.0), abs=1e-9)


def _direct_vs_rebinned(snap, width, abundance=1e-4):
    """(direct, fine + resample_spectral) spectra of pixel (0, 0) at channel ``width`` km/s."""
    from synth.instrument.spectral import resample_spectral
    kw = dict(distance=1 * u.kpc, velocity_range=(-2, 2) * u.km / u.s)
    fine = synth.synthesize(snap, CO10, abundance, channel_width=0.02 * u.km / u.s, **kw)
    direct = synth.synthesize(snap, CO10, abundance, channel_width=width * u.km / u.s, **kw)
    rebinned = resample_spectral(fine, width * u.km / u.s)
    return direct.unmasked_data[:, 0, 0].value, rebinned.unmasked_data[:, 0, 0].value


@pytest.mark.parametrize("width", [0.25, 0.5])
@pytest.mark.parametrize("flow", ["static", "gradient"])
def test_wide_channel_equals_fine_synthesis_rebinned(flow, width):
    """A spectrometer channel reports the intensity averaged over its bandpass (Wilson, Rohlfs
    & Hüttemeister 2013, Tools of Radio Astronomy, ch. 5, from memory), and the formal solution
    (Rybicki & Lightman 1979, eq. 1.29) is non-linear in tau: so synthesising directly at a wide
    channel must equal synthesising at 0.02 km/s and averaging over the wide channel
    (resample_spectral), within 1 % of the peak. Cases: (a) a thick static uniform core with
    sigma = 0.10 km/s (thermal 20 K CO + 0.065 km/s turbulence), (b) a thick column with a
    linear velocity gradient of 2 km/s across it. Both have peak tau >> 1."""
    nz = 40
    vz = np.broadcast_to(np.linspace(-1, 1, nz), (1, 1, nz)) if flow == "gradient" else None
    snap = uniform((1, 1, nz), 1e4 if flow == "static" else 3e3, 20.0, vz_kms=vz,
                   cell_pc=0.01, sigma_turb_kms=0.065)
    direct, rebinned = _direct_vs_rebinned(snap, width)
    assert direct.shape == rebinned.shape
    assert rebinned.max() > 10.0                   # thick: near J(T_ex) - J(T_bg)
    np.testing.assert_allclose(direct, rebinned, atol=0.01 * rebinned.max())


def test_wide_channel_thin_line_single_subchannel_and_thick_line_subsampled():
    """Where sub-channels are used (the rule of the kernel module docstring, written out here
    in numpy): a thin column (summed peak tau < TAU_LINEAR) gets one; a thick column gets
    ceil(dv / w), w = sigma_min / sqrt(1 + 2 ln(1 + tau_peak)); a fine channel gets one."""
    from synth.transfer.kernel import sub_channels
    tau_int = np.array([[1.0, 1.0], [1e-4, 1e-4], [1.0, 1.0]])
    sigma = np.array([[0.1, 0.2], [0.1, 0.1], [0.5, 0.4]])
    tau_peak = (tau_int / (np.sqrt(2 * np.pi) * sigma)).sum(axis=1)
    w = sigma.min(axis=1) / np.sqrt(1 + 2 * np.log1p(tau_peak))
    ref = np.where(tau_peak < 0.01, 1, np.ceil(0.5 / w))
    assert list(ref) == [12, 1, 3]
    np.testing.assert_array_equal(sub_channels(tau_int, sigma, 0.5), ref)
    np.testing.assert_array_equal(sub_channels(tau_int, sigma, 0.02), [1, 1, 1])


def test_tau_cube_is_the_channel_mean():
    """The tau cube holds tau averaged over each channel (header TAUKIND): its sum times the
    channel width is the column's velocity-integrated optical depth, tau_int = (c^3 A /
    (8 pi nu^3)) N_u (e^{h nu/kT} - 1) (Mangum & Shirley 2015, eq. 29, integrated over the
    profile), within 0.5 %, at a channel five times the line's sigma."""
    t, n, x, nz, cell = 20.0, 1e4, 1e-4, 10, 0.01
    snap = uniform((1, 1, nz), n, t, cell_pc=cell, sigma_turb_kms=0.065)
    res = synthesize_products(snap, CO10, x, distance=1 * u.kpc,
                              channel_width=0.5 * u.km / u.s,
                              velocity_range=(-2, 2) * u.km / u.s, products=("tau",))
    assert res.tau.meta["TAUKIND"] == "channel mean"
    nu, a = CO10.freq_hz, CO10.a_ul_s
    n_u = n * x * nz * cell * u.pc.to(u.cm) * boltzmann_upper_fraction(CO10, t)
    ref = C**3 * a / (8 * np.pi * nu**3) * n_u * np.expm1(H * nu / (K * t)) / 1e5   # km/s
    got = res.tau.unmasked_data[:, 0, 0].value.sum() * 0.5
    assert got == pytest.approx(ref, rel=5e-3)


def _sine_column(n_cells, amplitude=2.0, t_k=20.0, sigma_turb=0.065):
    """A 1 pc column of CO gas (n = 3000 cm^-3) with v_z = A sin(2 pi z / L) along the sight line."""
    z = (np.arange(n_cells) + 0.5) / n_cells
    vz = np.broadcast_to(amplitude * np.sin(2 * np.pi * z), (1, 1, n_cells))
    return uniform((1, 1, n_cells), 3e3, t_k, vz_kms=vz, cell_pc=1.0 / n_cells,
                   sigma_turb_kms=sigma_turb)


@pytest.mark.parametrize("n_cells, resolved", [(12, False), (128, True)])
def test_velocity_resolution_diagnostic_predicts_the_error(n_cells, resolved):
    """Under-resolved flow: a thick CO column with a sine flow of amplitude 2 km/s over 1 pc.
    At 12 cells the velocity change per cell, (2 pi A / N) |cos 2 pi z| (the exact derivative),
    exceeds the thermal+turbulent FWHM (0.24 km/s) in every cell: the diagnostic flags all the
    emission, the run warns, and the spectrum is off by > 10 % of the peak against a 1024-cell reference
    of the same flow (convergence, the reference being the resolved limit). At 128 cells no
    cell exceeds it (2 pi A / N = 0.098 km/s), no warning, and the error is < 1 %."""
    from synth.errors import UnderResolvedVelocityWarning
    from synth.transfer.synthesize import UNDERRESOLVED_WARN_FRACTION, warn_if_underresolved
    kw = dict(distance=1 * u.kpc, channel_width=0.02 * u.km / u.s,
              velocity_range=(-3, 3) * u.km / u.s)
    ref = synthesize_products(_sine_column(1024), CO10, 1e-4, **kw)
    assert ref.stats["velocity_resolution"]["underresolved_fraction"] == 0.0
    fwhm = np.sqrt(8 * np.log(2)) * np.sqrt(K * 20.0 / (28.0 * const.u.cgs.value) + 6.5e3**2) / 1e5
    z = (np.arange(n_cells) + 0.5) / n_cells
    expected = np.mean(2 * np.pi * 2.0 / n_cells * np.abs(np.cos(2 * np.pi * z)) > fwhm)
    res = synthesize_products(_sine_column(n_cells), CO10, 1e-4, **kw)
    diag = res.stats["velocity_resolution"]
    assert diag["underresolved_fraction"] == pytest.approx(expected)
    assert diag["emitting_cells"] == n_cells
    spec, ref_spec = (r.cube.unmasked_data[:, 0, 0].value for r in (res, ref))
    err = np.abs(spec - ref_spec).max() / ref_spec.max()
    if resolved:
        assert expected == 0.0 and diag["underresolved_emission_fraction"] == 0.0
        assert err < 0.01
        assert not warn_if_underresolved("sine", diag)
    else:
        assert expected == 1.0
        assert diag["underresolved_emission_fraction"] > UNDERRESOLVED_WARN_FRACTION
        assert err > 0.1
        with pytest.warns(UnderResolvedVelocityWarning, match=r"sine: 100 % of the emission"):
            assert warn_if_underresolved("sine", diag)


def test_run_summary_reports_velocity_resolution(tmp_path):
    """summary.json carries, per tracer, the velocity-resolution entry of the synthesis (the
    same numbers as synthesize_products' stats for the same cloud and line)."""
    import json
    conf = tmp_path / "c.toml"
    conf.write_text('[cloud]\ncells = 10\nseed = 4\n[sky]\ndistance_pc = 2000\n[channels]\n'
                    'width_kms = 0.5\nvelocity_min_kms = -12\nvelocity_max_kms = 12\n'
                    '[[tracer]]\nspecies = "CO"\ntransition = "1-0"\nabundance = 1e-6\n'
                    '[output]\nfigures = false\n')
    synth.run_config(str(conf), str(tmp_path / "out"), progress=False)
    got = json.loads((tmp_path / "out" / "summary.json").read_text())
    entry = got["tracers"]["CO_1-0"]["velocity_resolution"]
    direct = synthesize_products(synth.demo_cloud(cells=10, seed=4), CO10, 1e-6, distance=2 * u.kpc,
                                 channel_width=0.5 * u.km / u.s,
                                 velocity_range=(-12, 12) * u.km / u.s)
    ref = direct.stats["velocity_resolution"]
    assert entry["emitting_cells"] == ref["emitting_cells"] == 1000
    assert entry["underresolved_fraction"] == pytest.approx(ref["underresolved_fraction"])
    assert 0.0 < entry["underresolved_emission_fraction"] < 1.0


def test_tau_cube_line_centre_of_uniform_lte_slab():
    """Line-centre optical depth of a uniform static LTE slab, tau_0 = c^2 A_ul N_u
    (e^{h nu/kT} - 1) phi(nu_0) / (8 pi nu^2), phi(nu_0) = 1 / (sqrt(2 pi) sigma_nu),
    sigma_nu = nu sigma_v / c (Mangum & Shirley 2015, PASP 127, 266, eq. 29 with a Gaussian
    profile), sigma_v^2 = kT/m + sigma_turb^2 with m(12C16O) = 27.995 u (from memory). The
    centre channel (width 0.02 sigma) holds the channel mean of the Gaussian, tau_0 times
    [Phi(w/2) - Phi(-w/2)] / (w phi(0)) with w in dispersions (scipy ndtr), within 0.5 %."""
    t, n, x, nz, cell, turb = 20.0, 1e3, 2e-5, 20, 0.01, 0.1
    snap = uniform((1, 1, nz), n, t, cell_pc=cell, sigma_turb_kms=turb)
    sigma_v = np.sqrt(K * t / (27.995 * const.u.cgs.value) + (turb * 1e5) ** 2)   # cm/s
    width = 0.02 * sigma_v / 1e5                                                   # km/s
    res = synthesize_products(snap, CO10, x, distance=1 * u.kpc,
                              channel_width=width * u.km / u.s,
                              velocity_range=(-width / 2, width / 2) * u.km / u.s,
                              products=("tau",))
    assert res.tau.shape[0] == 1
    nu, a = CO10.freq_hz, CO10.a_ul_s
    n_u = n * x * nz * cell * u.pc.to(u.cm) * boltzmann_upper_fraction(CO10, t)
    sigma_nu = nu * sigma_v / C
    tau0 = C**2 * a * n_u * np.expm1(H * nu / (K * t)) / (8 * np.pi * nu**2
                                                           * np.sqrt(2 * np.pi) * sigma_nu)
    w = 0.02
    mean_factor = (ndtr(w / 2) - ndtr(-w / 2)) / (w / np.sqrt(2 * np.pi))
    assert 0.5 < tau0 < 5.0
    assert res.tau.unmasked_data[0, 0, 0].value == pytest.approx(tau0 * mean_factor, rel=5e-3)


def test_tau_cube_sobolev_plateau():
    """Uniform LTE medium in a Hubble flow v = K r: on the flat part of the spectrum the total
    optical depth is the Sobolev value tau_S = (c^3 A / (8 pi nu^3 K)) n_u (e^{h nu/kT} - 1)
    (Sobolev 1960; Castor 1970, MNRAS 149, 111), here set to 2, within 1 %."""
    t, cell_pc = 20.0, 0.01
    dv_cell = 0.05                                              # km/s per cell, < thermal
    nz = 200
    vz = dv_cell * (np.arange(nz) - (nz - 1) / 2)
    grad_s = dv_cell * 1e5 / (cell_pc * u.pc.to(u.cm))
    nu, a = CO10.freq_hz, CO10.a_ul_s
    n_u = 2.0 * grad_s / (C**3 * a / (8 * np.pi * nu**3) * np.expm1(H * nu / (K * t)))
    snap = uniform((1, 1, nz), n_u / boltzmann_upper_fraction(CO10, t) / 1e-4, t,
                   vz_kms=np.broadcast_to(vz, (1, 1, nz)), cell_pc=cell_pc)
    res = synthesize_products(snap, CO10, 1e-4, distance=1 * u.kpc,
                              channel_width=0.05 * u.km / u.s,
                              velocity_range=(-2, 2) * u.km / u.s, products=("tau",))
    tau_s = C**3 * a / (8 * np.pi * nu**3 * grad_s) * n_u * np.expm1(H * nu / (K * t))
    np.testing.assert_allclose(res.tau.unmasked_data[:, 0, 0].value, tau_s, rtol=0.01)


def test_column_map_is_the_sum_of_n_dz():
    """Column density N = X ∫ n(z) dz (definition): a density rising linearly with depth,
    n(z) = n_0 (1 + z / L), gives X n_0 L 3/2 over a depth L (exact for the cell-midpoint sum
    of a linear profile), and a map that scales with n_0 across the sky, within 1e-6."""
    nz, cell_pc, x = 16, 0.02, 1e-8
    zc = (np.arange(nz) + 0.5) / nz
    n0 = np.array([[100.0, 300.0], [1000.0, 20.0], [5.0, 7.0]])[:, :, None]   # (x, y)
    n = n0 * (1 + zc)[None, None, :]
    snap = synth.Snapshot(n_h2=n * u.cm**-3, t_kin=np.full(n.shape, 15.0) * u.K,
                          velocity=np.zeros((3,) + n.shape) * u.km / u.s, cell_size=cell_pc * u.pc)
    res = synthesize_products(snap, CO10, x, distance=1 * u.kpc, channel_width=0.2 * u.km / u.s,
                              velocity_range=(-1, 1) * u.km / u.s, products=("column",))
    depth = nz * cell_pc * u.pc.to(u.cm)
    ref = x * n0[:, :, 0] * depth * 1.5                       # (x, y)
    assert res.column.unit == u.cm**-2 and res.column.shape == (2, 3)   # (y, x)
    np.testing.assert_allclose(res.column.value, ref.T, rtol=1e-6)
