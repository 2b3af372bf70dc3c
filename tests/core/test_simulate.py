"""Tests of the scan simulator: film model, geometry truth, scanner pipeline, files."""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from scipy import integrate, optimize, special

from stripscan.core.records import StripGeometry
from stripscan.sim.objects import FLARE_KERNELS, FilmModel, ScannerModel, StripSpec, TabletSpec
from stripscan.sim.simulate import (
    expected_signal,
    render_transmittance,
    simulate_scan,
    srgb_encode,
    write_certificate,
    write_tiff,
)

# A scanner that reads transmittance itself: gain 1, no dark signal, linear sensor,
# no optics, no noise, flat lamp.
IDEAL = ScannerModel(gain=1.0, dark_offset=0.0, response_gamma=1.0, lamp_falloff=0.0, flare_fraction=0.0,
                     blur_sigma_px=0.0, noise_sd=0.0, shot_noise=0.0)
PLATEN = (200.0, 200.0)
DPI = 100.0
FILMS = [FilmModel(), FilmModel(base_fog=0.2, dmax=3.2, log_e_mid=1.2, slope=3.0, asymmetry=0.35),
         FilmModel(base_fog=0.15, dmax=4.0, log_e_mid=2.0, slope=4.5, asymmetry=2.0)]


def same_angle(a: float, b: float) -> bool:
    return abs((a - b + 180.0) % 360.0 - 180.0) < 1e-9


def strip(**changes) -> StripSpec:
    return StripSpec(film=FilmModel(), **{"center_mm": (100.0, 100.0), **changes})


# ----------------------------------------------------------------------------- film model


@pytest.mark.parametrize("film", FILMS)
def test_log_e_at_net_is_the_exact_inverse(film):
    for net in (1e-4, 0.05, 0.25, 1.0, 2.0, film.net_max - 1e-3):
        assert film.density(film.log_e_at_net(net)) - film.base_fog == pytest.approx(net, abs=1e-9)


@pytest.mark.parametrize("film", FILMS)
def test_gradient_matches_numerical_derivative(film):
    x = np.linspace(-1.0, 4.0, 200_001)
    numeric = np.gradient(film.density(x), x)
    assert np.max(np.abs(film.gradient(x) - numeric)[1:-1]) < 1e-6


@pytest.mark.parametrize("film", FILMS)
def test_curve_is_monotone_between_base_fog_and_dmax(film):
    x = np.linspace(-0.5, 3.5, 10_001)  # the exposures a strip covers
    assert np.all(np.diff(film.density(x)) > 0) and np.all(film.gradient(x) > 0)
    wide = film.density(np.linspace(-20.0, 20.0, 10_001))
    assert np.all(np.diff(wide) >= 0)
    assert film.density(-50.0) == pytest.approx(film.base_fog, abs=1e-12)
    assert film.density(50.0) == pytest.approx(film.dmax, abs=1e-12)


@pytest.mark.parametrize("film", FILMS)
def test_truth_figures_against_independent_root_finding(film):
    truth = film.truth()

    def at(net):
        return optimize.brentq(lambda x: film.density(x) - film.base_fog - net, -5, 8, xtol=1e-14)

    x1, x2 = at(0.25), at(2.00)
    # ISO 9236-1: average gradient between net densities 0.25 and 2.00
    assert truth["average_gradient"] == pytest.approx((2.00 - 0.25) / (x2 - x1), rel=1e-9)
    assert truth["gradient_low_log_exposure"] == pytest.approx(x1, abs=1e-9)
    assert truth["latitude_log_exposure"] == pytest.approx(x2 - x1, abs=1e-9)
    # ISO 9236-1: speed point at net density 1.00
    assert truth["speed_log_exposure"] == pytest.approx(at(1.00), abs=1e-9)
    assert truth["base_fog"] == film.base_fog and truth["dmax_asymptote"] == film.dmax


@pytest.mark.parametrize("film", FILMS)
def test_gamma_is_the_numerical_maximum_slope(film):
    truth = film.truth()
    res = optimize.minimize_scalar(lambda x: -film.gradient(x), bounds=(-2, 6), method="bounded",
                                   options={"xatol": 1e-10})
    assert truth["gamma_log_exposure"] == pytest.approx(res.x, abs=1e-6)
    assert truth["gamma"] == pytest.approx(-res.fun, abs=1e-6)
    grid = np.linspace(-2, 6, 400_001)
    assert truth["gamma"] >= film.gradient(grid).max() - 1e-12


def test_unreachable_densities():
    film = FilmModel(base_fog=0.2, dmax=1.8)
    with pytest.raises(ValueError):
        film.log_e_at_net(2.0)
    truth = film.truth()
    assert truth["gradient_high_log_exposure"] is None and truth["average_gradient"] is None
    assert truth["speed_log_exposure"] is not None
    with pytest.raises(ValueError):
        FilmModel(base_fog=1.0, dmax=0.5)


# ----------------------------------------------------------------------------- densities and signal


def test_transmission_density_definition():
    # ISO 5-2: D = -log10 T, D 1 passes 10 %, D 2 passes 1 %
    tablet = TabletSpec(densities=(0.3, 1.0, 2.0), center_mm=(100.0, 100.0))
    scan = simulate_scan([tablet], platen_mm=PLATEN, dpi=DPI, scanner=IDEAL)
    signal = scan.image / 65535.0
    (_, c1, c2) = [signal[round(r), round(c)] for r, c in scan.truth[0]["step_centers_rc"]]
    assert c1 == pytest.approx(0.1, abs=1e-5)
    assert c2 == pytest.approx(0.01, abs=1e-5)
    assert expected_signal(10**-1.0, IDEAL) == pytest.approx(0.1, abs=1e-15)
    assert expected_signal(10**-2.0, IDEAL) == pytest.approx(0.01, abs=1e-15)


def test_srgb_closed_form_points():
    # IEC 61966-2-1, closed form: the break point and mid grey
    assert srgb_encode(0.0031308) == pytest.approx(0.04045, abs=1e-6)
    assert srgb_encode(0.5) == pytest.approx(0.7354, abs=1e-4)
    assert srgb_encode(0.0) == 0.0 and srgb_encode(1.0) == pytest.approx(1.0, abs=1e-12)


def test_srgb_matches_scikit_image():
    # Reference implementation: scikit-image's xyz2rgb applies the sRGB companding
    # (IEC 61966-2-1) after its matrix; a neutral grey passes the matrix unchanged.
    from skimage.color import xyz2rgb
    from skimage.color.colorconv import xyz_from_rgb

    linear = np.linspace(0.0, 1.0, 2001)
    xyz = (xyz_from_rgb @ np.stack([linear] * 3))[:, :, None].transpose(1, 2, 0)
    reference = xyz2rgb(xyz)[:, 0, 1]
    assert np.max(np.abs(srgb_encode(linear) - reference)) < 1e-6
    assert np.max(np.abs(srgb_encode(linear.astype(np.float32)) - reference)) < 2e-6


def test_eight_bit_srgb_codes():
    tablet = TabletSpec(densities=(0.1, 0.7, 1.5), center_mm=(100.0, 100.0))
    sc = dataclasses.replace(IDEAL, bits=8, encoding="srgb", gain=0.9, dark_offset=0.002, response_gamma=0.97)
    scan = simulate_scan([tablet], platen_mm=PLATEN, dpi=DPI, scanner=sc)
    assert scan.image.dtype == np.uint8
    for (r, c), od in zip(scan.truth[0]["step_centers_rc"], scan.truth[0]["od"]):
        want = np.rint(255 * srgb_encode(expected_signal(10**-od, sc)))
        assert scan.image[round(r), round(c)] == want


def test_lamp_falloff_and_warmup_on_an_empty_platen():
    sc = dataclasses.replace(IDEAL, lamp_falloff=0.015, gain=0.92, warmup_gain=1.01, dark_offset=0.002)
    scan = simulate_scan([], platen_mm=(100.0, 10.0), dpi=DPI, scanner=sc)
    row = scan.image[5] / 65535.0
    cols = np.arange(row.size)
    want = expected_signal(1.0, sc, col=cols, width=row.size)
    assert np.max(np.abs(row - want)) < 1e-5
    edge = 0.92 * 1.01 * (1 - 0.015 * ((0 - (row.size - 1) / 2) / (row.size / 2)) ** 2) + 0.002
    assert want[0] == pytest.approx(edge, abs=1e-12)
    assert row.max() == pytest.approx(0.92 * 1.01 + 0.002, abs=2e-5)


@pytest.mark.parametrize("angle", [0.0, 33.0])
def test_full_pipeline_reads_expected_signal_at_step_centres(angle):
    # Blur, sensor gamma, dark signal, lamp falloff and noise on; flare off (it depends on the surround).
    sc = ScannerModel(flare_fraction=0.0, seed=7)
    scan = simulate_scan([strip(angle_deg=angle)], platen_mm=PLATEN, dpi=150.0, scanner=sc)
    signal = scan.image / 65535.0
    width = signal.shape[1]
    for (r, c), od in zip(scan.truth[0]["step_centers_rc"], scan.truth[0]["od"]):
        r, c = round(r), round(c)
        block = signal[r - 12:r + 13, c - 12:c + 13]  # inside the 41 x 83 px step at any angle
        assert block.mean() == pytest.approx(expected_signal(10**-od, sc, col=c, width=width), abs=5e-4)


def test_noise_follows_its_model():
    sc = dataclasses.replace(IDEAL, noise_sd=0.0015, shot_noise=0.002, gain=0.92, seed=3)
    scan = simulate_scan([], platen_mm=(60.0, 60.0), dpi=DPI, scanner=sc)
    signal = scan.image / 65535.0
    assert signal.mean() == pytest.approx(0.92, abs=1e-4)
    assert signal.std() == pytest.approx(math.sqrt(0.0015**2 + 0.002**2 * 0.92), rel=0.03)


def test_flare_raises_a_dense_step_next_to_open_platen():
    tablet = TabletSpec(densities=(0.5, 3.0, 0.5), center_mm=(100.0, 100.0))
    quiet = simulate_scan([tablet], platen_mm=PLATEN, dpi=DPI, scanner=IDEAL)
    flared = simulate_scan([tablet], platen_mm=PLATEN, dpi=DPI,
                           scanner=dataclasses.replace(IDEAL, flare_fraction=0.002))
    r, c = (round(v) for v in quiet.truth[0]["step_centers_rc"][1])
    assert quiet.image[r, c] / 65535 == pytest.approx(1e-3, abs=1e-5)
    extra = (int(flared.image[r, c]) - int(quiet.image[r, c])) / 65535
    assert 0.1 * 0.002 < extra < 0.002  # light leaks in from the bright surround, by less than f


def edge_spread(kernel: str, r: float, sigma: float) -> float:
    """Share of the flare kernel's weight lying beyond a straight edge at distance r (same units as sigma).

    The Gaussian has a closed form; the other shapes are integrated numerically
    over the half-plane with scipy (an independent reference, not the simulator's code).
    """
    if kernel == "gaussian":
        return 0.5 * special.erfc(r / (sigma * math.sqrt(2.0)))  # 1-D normal tail (closed form)
    if kernel == "exponential":
        def weight(y, x):  # exp(-rho / sigma), whose integral over the plane is 2 pi sigma^2
            return math.exp(-math.hypot(x, y) / sigma) / (2.0 * math.pi * sigma**2)
        reach = 40.0 * sigma
    else:
        def weight(y, x):  # 0.7 N(sigma / 2) + 0.3 N(2 sigma), both normalised in 2-D
            return sum(w * math.exp(-(x * x + y * y) / (2.0 * s * s)) / (2.0 * math.pi * s * s)
                       for w, s in ((0.7, 0.5 * sigma), (0.3, 2.0 * sigma)))
        reach = 20.0 * sigma
    half, _ = integrate.dblquad(weight, r, r + reach, 0.0, reach, epsabs=1e-12)
    return 2.0 * half  # y from -reach to reach, by symmetry


@pytest.mark.parametrize("kernel", FLARE_KERNELS)
@pytest.mark.parametrize("sigma_mm", [10.0, 25.0])
def test_each_flare_kernel_leaves_a_uniform_field_unchanged(kernel, sigma_mm):
    # s = (1 - f) T + f K * T with K of total weight 1: a uniform T comes through as it is.
    sc = dataclasses.replace(IDEAL, flare_fraction=0.3, flare_sigma_mm=sigma_mm, flare_kernel=kernel)
    open_platen = simulate_scan([], platen_mm=(120.0, 80.0), dpi=DPI, scanner=sc)
    assert np.all(open_platen.image == 65535)
    grey = TabletSpec(densities=(0.5,), end_density=0.5, step_length_mm=300.0, width_mm=300.0, end_margin_mm=0.0,
                      center_mm=(60.0, 40.0))  # one film piece larger than the platen
    covered = simulate_scan([grey], platen_mm=(120.0, 80.0), dpi=DPI, scanner=sc)
    assert np.all(covered.image == round(65535 * 10**-0.5))  # ISO 5-2: T = 10**-D


@pytest.mark.parametrize("kernel", FLARE_KERNELS)
@pytest.mark.parametrize(("sigma_mm", "dpi"), [(10.0, 50.8), (25.0, 150.0)])
def test_flare_edge_spread_matches_the_kernel(kernel, sigma_mm, dpi):
    # Open platen left of x = 150 mm, opaque film (D 8) right of it: the light found in the dark half
    # at distance r is f times the kernel's weight beyond the edge, its edge-spread function.
    f = 0.5  # large, so the spread light stands well above the 16-bit quantisation
    opaque = TabletSpec(densities=(8.0,), end_density=8.0, end_margin_mm=0.0, step_length_mm=400.0,
                        width_mm=400.0, center_mm=(350.0, 50.0))
    sc = dataclasses.replace(IDEAL, flare_fraction=f, flare_sigma_mm=sigma_mm, flare_kernel=kernel)
    scan = simulate_scan([opaque], platen_mm=(300.0, 100.0), dpi=dpi, scanner=sc)
    row = scan.image[scan.image.shape[0] // 2] / 65535.0
    pitch = 25.4 / dpi
    for r_sigma in (0.25, 0.5, 1.0, 2.0, 3.0, 5.0):
        col = round((150.0 + r_sigma * sigma_mm) / pitch - 0.5)
        r_mm = (col + 0.5) * pitch - 150.0  # the pixel centre's distance from the edge
        want = f * edge_spread(kernel, r_mm, sigma_mm)
        # The simulator convolves a block-reduced image (blocks of a third of the kernel's narrowest
        # scale): within 0.5 % of the flare fraction everywhere along the tail.
        assert row[col] == pytest.approx(want, abs=0.005 * f), (r_sigma, row[col], want)
    # Far from the edge the dark side holds (nearly) no light and the open side nearly all of it.
    assert row[-1] < 0.005 * f + 1e-6 and row[0] > 1.0 - 0.005 * f


# ----------------------------------------------------------------------------- geometry


@pytest.mark.parametrize("angle", [0.0, 90.0, 180.0, 33.0, -120.0])
@pytest.mark.parametrize("flip", [False, True])
def test_step_centres_sit_on_their_density(angle, flip):
    spec = strip(angle_deg=angle, flip=flip)
    T = render_transmittance([spec], platen_mm=PLATEN, dpi=DPI)
    truth = simulate_scan([spec], platen_mm=PLATEN, dpi=DPI, scanner=IDEAL).truth[0]
    for (r, c), od in zip(truth["step_centers_rc"], truth["od"]):
        assert T[round(r), round(c)] == pytest.approx(10**-od, rel=1e-5)
    r, c = truth["base_fog_center_rc"]
    assert T[round(r), round(c)] == pytest.approx(10**-truth["base_fog"], rel=1e-5)
    assert truth["od"] == pytest.approx(list(spec.film.density(spec.log_exposures)), abs=0)


@pytest.mark.parametrize("angle", [0.0, 90.0, 180.0, 33.0, -120.0])
@pytest.mark.parametrize("flip", [False, True])
def test_outline_is_consistent_with_the_angle(angle, flip):
    spec = strip(angle_deg=angle, flip=flip)
    truth = simulate_scan([spec], platen_mm=PLATEN, dpi=DPI, scanner=IDEAL).truth[0]
    pitch = 25.4 / DPI
    p0, p1, p2, p3 = np.asarray(truth["outline_rc"])
    assert same_angle(math.degrees(math.atan2(-(p1 - p0)[0], (p1 - p0)[1])), angle)
    assert same_angle(truth["angle_deg"], angle) and -180.0 < truth["angle_deg"] <= 180.0
    assert np.hypot(*(p1 - p0)) == pytest.approx(spec.n_steps * spec.step_length_mm / pitch, rel=1e-12)
    assert np.hypot(*(p3 - p0)) == pytest.approx(spec.band_width_mm / pitch, rel=1e-12)
    assert np.dot(p1 - p0, p3 - p0) == pytest.approx(0.0, abs=1e-9)
    assert np.allclose(p2, p1 + p3 - p0)
    # Unflipped, the band's far side (p0 -> p3) points to the right of the strip's direction on screen.
    cross = (p1 - p0)[1] * (p3 - p0)[0] - (p1 - p0)[0] * (p3 - p0)[1]
    assert (cross > 0) != flip
    # Step 1 lies at the outline's first corner, the unexposed band beyond the far side.
    T = render_transmittance([spec], platen_mm=PLATEN, dpi=DPI)
    axis, across = (p1 - p0) / np.hypot(*(p1 - p0)), (p3 - p0) / np.hypot(*(p3 - p0))
    inside = p0 + 3 * axis + 3 * across
    outside = p0 + 3 * axis - 3 * across  # the film edge, side margin 0
    beyond = p3 + 3 * axis + 3 * across
    assert T[tuple(np.rint(inside).astype(int))] == pytest.approx(10 ** -truth["od"][0], rel=1e-5)
    assert T[tuple(np.rint(outside).astype(int))] == 1.0
    assert T[tuple(np.rint(beyond).astype(int))] == pytest.approx(10 ** -truth["base_fog"], rel=1e-5)
    geometry = StripGeometry.from_dict(json.loads(json.dumps(truth["geometry"])))
    assert np.allclose([geometry.step_center_rc(k) for k in (1, 21)], np.asarray(truth["step_centers_rc"])[[0, -1]])


@pytest.mark.parametrize("angle", [0.0, 33.0, 90.0, 151.0])
def test_film_piece_position_from_image_moments(angle):
    # Independent of the truth code: where the rendered film lies, measured from the image.
    # The film is flat (density 1 everywhere), so 1 - T is proportional to area coverage.
    flat = FilmModel(base_fog=1.0, dmax=1.0 + 1e-12)
    spec = StripSpec(film=flat, angle_deg=angle, center_mm=(97.3, 104.9))
    T = render_transmittance([spec], platen_mm=PLATEN, dpi=DPI)
    weight = (1.0 - T.astype(np.float64)) / 0.9
    rows, cols = np.indices(T.shape)
    pitch = 25.4 / DPI
    mass = weight.sum()
    centre = ((weight * rows).sum() / mass, (weight * cols).sum() / mass)
    assert centre == pytest.approx((104.9 / pitch - 0.5, 97.3 / pitch - 0.5), abs=0.01)
    length = (2 * spec.end_margin_mm + spec.n_steps * spec.step_length_mm) / pitch
    assert mass == pytest.approx(length * spec.film_width_mm / pitch, rel=1e-5)
    dr, dc = rows - centre[0], cols - centre[1]
    cov = np.array([[(weight * dr * dr).sum(), (weight * dr * dc).sum()],
                    [(weight * dr * dc).sum(), (weight * dc * dc).sum()]]) / mass
    _, evecs = np.linalg.eigh(cov)
    line = math.degrees(math.atan2(-evecs[0, -1], evecs[1, -1])) % 180.0
    assert min(abs(line - angle % 180.0), 180.0 - abs(line - angle % 180.0)) < 0.01
    assert cov[0, 0] + cov[1, 1] == pytest.approx((length**2 + (spec.film_width_mm / pitch) ** 2) / 12, rel=1e-3)


@pytest.mark.parametrize("angle", [0.0, 33.0, 45.0, 170.0])
def test_area_coverage_is_sub_pixel_exact(angle):
    # A uniform piece of density 1 at an off-grid position: sum(1 - T) is its area in px^2.
    tablet = TabletSpec(densities=(1.0,) * 3, end_density=1.0, center_mm=(30.13, 40.37), angle_deg=angle)
    T = render_transmittance([tablet], platen_mm=(60.0, 80.0), dpi=50.8)  # 0.5 mm pixels
    area_px = (1.0 - T.astype(np.float64)).sum() / 0.9
    assert area_px == pytest.approx((3 * 10 + 2 * 5) * 20 / 0.25, abs=0.1)
    # Against 8 x 8 supersampling: edges agree, only corner pixels differ slightly.
    fine = render_transmittance([tablet], platen_mm=(60.0, 80.0), dpi=50.8 * 8)
    diff = np.abs(fine.reshape(160, 8, 120, 8).mean(axis=(1, 3)) - T)
    corners = np.asarray(simulate_scan([tablet], platen_mm=(60.0, 80.0), dpi=50.8, scanner=IDEAL)
                         .truth[0]["film_outline_rc"])
    off = np.argwhere(diff > 1e-4)
    assert diff.max() < 0.02
    assert all(np.min(np.hypot(*(corners - p).T)) < 1.5 for p in off)


def test_objects_overlap_multiplicatively_and_tablet_ends():
    tablet = TabletSpec(densities=(0.5, 1.0), center_mm=(100.0, 100.0), end_density=0.04)
    over = TabletSpec(densities=(0.3,), step_length_mm=40.0, end_margin_mm=0.0, center_mm=(100.0, 100.0),
                      angle_deg=90.0)
    T = render_transmittance([tablet, over], platen_mm=PLATEN, dpi=DPI)
    truth = simulate_scan([tablet, over], platen_mm=PLATEN, dpi=DPI, scanner=IDEAL).truth
    r, c = truth[0]["step_centers_rc"][0]
    assert T[round(r), round(c)] == pytest.approx(10 ** -(0.5 + 0.3), rel=1e-5)
    p0, p1, _, _ = np.asarray(truth[0]["film_outline_rc"])
    end = p0 + (p1 - p0) / np.hypot(*(p1 - p0)) * 2.0 / (25.4 / DPI) + np.array([4.0, 0.0])
    assert T[tuple(np.rint(end).astype(int))] == pytest.approx(10**-0.04, rel=1e-5)
    assert truth[0]["kind"] == "tablet" and truth[0]["od"] == [0.5, 1.0]


# ----------------------------------------------------------------------------- pipeline, defects, files


def test_deterministic_per_seed():
    objs = [strip(angle_deg=12.0), TabletSpec(densities=(0.2, 1.2, 2.2), center_mm=(100.0, 170.0))]
    sc = ScannerModel(dust=4, scratches=2, hairs=1, seed=11)
    a = simulate_scan(objs, platen_mm=PLATEN, dpi=DPI, scanner=sc)
    b = simulate_scan(objs, platen_mm=PLATEN, dpi=DPI, scanner=sc)
    c = simulate_scan(objs, platen_mm=PLATEN, dpi=DPI, scanner=dataclasses.replace(sc, seed=12))
    assert np.array_equal(a.image, b.image) and a.defects == b.defects
    assert not np.array_equal(a.image, c.image)
    json.dumps([a.truth, a.defects])  # plain JSON-ready data


@pytest.mark.parametrize(
    ("scanner", "dtype", "extra"),
    [(ScannerModel(bits=8, encoding="srgb", channels=3), np.uint8, (3,)),
     (ScannerModel(bits=16, channels=1), np.uint16, ())],
)
def test_dtype_and_shape(scanner, dtype, extra):
    scan = simulate_scan([strip()], platen_mm=(200.0, 120.0), dpi=DPI, scanner=scanner)
    assert scan.image.dtype == dtype and scan.image.shape == (472, 787) + extra
    if extra:  # per-channel gains (1.0, 0.99, 1.02) on the open platen
        corner = scan.image[:40, :40].reshape(-1, 3).mean(axis=0)
        assert corner[1] < corner[0] < corner[2]


def test_defects_change_only_their_own_pixels():
    objs = [strip(angle_deg=5.0)]
    clean = ScannerModel(noise_sd=0.0, shot_noise=0.0, flare_fraction=0.0, seed=5)  # flare reaches everywhere
    dirty = dataclasses.replace(clean, dust=6, scratches=3, hairs=2)
    a = simulate_scan(objs, platen_mm=PLATEN, dpi=DPI, scanner=clean)
    b = simulate_scan(objs, platen_mm=PLATEN, dpi=DPI, scanner=dirty)
    assert [d["kind"] for d in b.defects].count("dust") == 6 and len(b.defects) == 11
    near = np.zeros(a.image.shape, dtype=bool)
    rows, cols = np.indices(a.image.shape)
    for d in b.defects:
        pts = np.asarray(d.get("points_rc") or d.get("ends_rc") or [d["center_rc"]])
        reach = d.get("radius_px", 0.5 * d.get("width_px", 0)) + 4  # the blur reaches a little way
        lo, hi = pts.min(axis=0) - reach, pts.max(axis=0) + reach
        near |= (rows >= lo[0]) & (rows <= hi[0]) & (cols >= lo[1]) & (cols <= hi[1])
    changed = a.image != b.image
    assert changed.any() and not (changed & ~near).any()
    for d in b.defects:
        if d["kind"] == "dust":
            r, c = (round(v) for v in d["center_rc"])
            assert b.image[r, c] < a.image[r, c]


def test_invalid_settings():
    with pytest.raises(ValueError):
        ScannerModel(bits=12)
    with pytest.raises(ValueError):
        ScannerModel(encoding="gamma")
    with pytest.raises(ValueError, match="flare_kernel"):
        ScannerModel(flare_kernel="lorentzian")
    with pytest.raises(ValueError, match="flare_sigma_mm"):
        ScannerModel(flare_fraction=0.001, flare_sigma_mm=0.0)
    with pytest.raises(ValueError):
        simulate_scan([strip(step_length_mm=0.2)], platen_mm=PLATEN, dpi=DPI)  # steps under 1 px


@pytest.mark.parametrize("scanner", [ScannerModel(bits=16), ScannerModel(bits=8, encoding="srgb", channels=3)])
def test_write_tiff_round_trip(tmp_path, scanner):
    tifffile = pytest.importorskip("tifffile")
    scan = simulate_scan([strip()], platen_mm=(200.0, 60.0), dpi=150.0, scanner=scanner)
    path = tmp_path / "scan.tif"
    write_tiff(path, scan)
    with tifffile.TiffFile(path) as tif:
        page = tif.pages[0]
        assert np.array_equal(page.asarray(), scan.image)
        num, den = page.tags["XResolution"].value
        assert num / den == pytest.approx(150.0)
        assert page.tags["ResolutionUnit"].value == 2  # inch
        want = tifffile.PHOTOMETRIC.RGB if scan.image.ndim == 3 else tifffile.PHOTOMETRIC.MINISBLACK
        assert page.photometric == want


@pytest.mark.parametrize("header", [True, False])
def test_write_certificate(tmp_path, header):
    densities = TabletSpec().densities
    path = tmp_path / "tablet.csv"
    write_certificate(path, densities, header=header)
    lines = path.read_text(encoding="utf-8").splitlines()
    assert any(line.startswith("#") for line in lines) == header
    rows = [line.split(",") for line in lines if not line.startswith("#")]
    assert rows[0] == ["step", "density"]
    assert [int(s) for s, _ in rows[1:]] == list(range(1, 22))
    assert [float(d) for _, d in rows[1:]] == list(densities)  # common practice: 0.05 .. 3.05 in 0.15
    assert float(rows[-1][1]) == 3.05
