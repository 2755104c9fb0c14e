"""Tests for synthgen.scene.backgrounds: shapes, determinism, each kind's defining property."""

import json
import math

import numpy as np
import pytest
from scipy import ndimage

from synthgen.errors import ConfigError
from synthgen.scene.backgrounds import (
    BACKGROUND_KINDS,
    BackgroundSpec,
    checker,
    linear,
    noise,
    noise_octaves_drawn,
    radial,
    render_background,
    sample_colour_pair,
    solid,
    stripes,
    value_noise,
)

H, W = 120, 160


def _rng(seed=0):
    return np.random.default_rng(seed)


def _centres(h, w):
    """Pixel-centre coordinates (x, y), each (h, w), per synthgen.geometry."""
    y, x = np.mgrid[0:h, 0:w]
    return x + 0.5, y + 0.5


def _monotone_within(values, tol):
    """True when ``values`` never drops by more than ``tol`` (non-decreasing up to tol)."""
    run_max = np.maximum.accumulate(values)
    return bool(np.all(run_max - values <= tol))


@pytest.mark.parametrize("kind", BACKGROUND_KINDS)
@pytest.mark.parametrize("size", [(H, W), (1, 1), (1, 37), (29, 1), (7, 5)])
def test_shape_and_dtype(kind, size):
    """Every kind gives a uint8 (H, W, 3) canvas for any size, tiny ones included."""
    img, info = render_background(BackgroundSpec(kind=kind), *size, rng=_rng())
    # ARCHITECTURE.md: image arrays are (H, W, 3) uint8
    assert img.shape == (*size, 3)
    assert img.dtype == np.uint8
    assert img.flags.c_contiguous


@pytest.mark.parametrize("kind", BACKGROUND_KINDS)
def test_same_seed_same_bytes_different_seed_different(kind):
    """The same generator seed gives identical bytes; another seed gives other bytes."""
    spec = BackgroundSpec(kind=kind)
    a, ia = render_background(spec, H, W, rng=_rng(7))
    b, ib = render_background(spec, H, W, rng=_rng(7))
    c, _ = render_background(spec, H, W, rng=_rng(8))
    # numpy.random docs: a Generator from the same seed yields the same stream
    assert a.tobytes() == b.tobytes()
    assert ia == ib
    assert a.tobytes() != c.tobytes()


@pytest.mark.parametrize("kind", BACKGROUND_KINDS)
def test_info_is_json_and_names_the_kind(kind):
    """The record of what was drawn survives a JSON round trip and names a drawn kind."""
    _, info = render_background(BackgroundSpec(kind=kind), H, W, rng=_rng(3))
    # RFC 8259 / Python's json module: the dict must round-trip unchanged
    assert json.loads(json.dumps(info)) == info
    assert info["kind"] in BACKGROUND_KINDS[:-1]
    if kind != "mix":
        assert info["kind"] == kind


def test_solid_is_constant():
    """A solid canvas holds one colour, the one recorded."""
    img, info = render_background(BackgroundSpec(kind="solid"), H, W, rng=_rng(1))
    colours = np.unique(img.reshape(-1, 3), axis=0)
    # definition of a solid fill (common practice): a single distinct colour
    assert colours.tolist() == [info["colour"]]


def test_colours_respect_brightness_and_contrast():
    """Colour pairs have HSV values inside the brightness range and differ by the drawn gap."""
    rng = _rng(5)
    for _ in range(200):
        c0, c1 = sample_colour_pair((0.3, 0.8), (0.0, 1.0), (0.2, 0.4), rng=rng)
        v0, v1 = max(c0) / 255, max(c1) / 255  # HSV V = max(R, G, B) (common practice)
        assert 0.3 - 0.5 / 255 <= min(v0, v1) <= 0.8 + 0.5 / 255
        assert 0.2 - 1 / 255 <= abs(v1 - v0) <= 0.4 + 1 / 255


@pytest.mark.parametrize("seed", range(6))
def test_linear_is_monotone_along_its_direction(seed):
    """Sorted by projection on the drawn direction, every channel runs one way only."""
    img, info = render_background(BackgroundSpec(kind="linear"), H, W, rng=_rng(seed))
    a = math.radians(info["angle"])
    x, y = _centres(H, W)
    proj = (x * math.cos(a) + y * math.sin(a)).ravel()
    order = np.argsort(proj, kind="stable")
    (c0, c1) = info["colours"]
    for ch in range(3):
        vals = img[..., ch].ravel()[order].astype(int)
        sign = 1 if c1[ch] >= c0[ch] else -1
        # definition of a linear gradient (common practice): a monotone function of the
        # projection; 1 level of slack for float32 ties between nearly equal projections
        assert _monotone_within(sign * vals, 1)
        # the extreme corners carry the end colours exactly
        assert vals[0] == c0[ch] and vals[-1] == c1[ch]


def test_linear_worked_example():
    """A horizontal gradient over 5 pixels steps by a quarter of the colour difference."""
    img = linear(2, 5, (0, 100, 200), (200, 100, 0), 0.0)
    # hand-computed: weights 0, 1/4, 1/2, 3/4, 1 at the pixel centres
    assert img[1, :, 0].tolist() == [0, 50, 100, 150, 200]
    assert img[0, :, 1].tolist() == [100] * 5
    assert img[0, :, 2].tolist() == [200, 150, 100, 50, 0]


@pytest.mark.parametrize("seed", range(4))
def test_radial_depends_only_on_distance_from_centre(seed):
    """Sorted by distance from the drawn centre, every channel runs one way only."""
    img, info = render_background(BackgroundSpec(kind="radial"), H, W, rng=_rng(seed))
    cx, cy = info["centre"]
    x, y = _centres(H, W)
    dist = np.hypot(x - cx, y - cy).ravel()
    order = np.argsort(dist, kind="stable")
    c0, c1 = info["colours"]
    for ch in range(3):
        vals = img[..., ch].ravel()[order].astype(int)
        sign = 1 if c1[ch] >= c0[ch] else -1
        # definition of a radial gradient (common practice): a monotone function of the
        # Euclidean distance to the centre; 1 level of slack for float32 near-ties
        assert _monotone_within(sign * vals, 1)
    outside = dist.reshape(H, W) >= info["radius"] * (1 + 1e-5)
    if outside.any():
        assert (img[outside] == np.array(c1)).all()


def test_radial_is_mirror_symmetric_about_a_pixel_centre():
    """A centre on a pixel centre gives a canvas symmetric under left-right and up-down flips."""
    img = radial(41, 61, (10, 200, 30), (250, 0, 128), (30.5, 20.5), 25.0)
    # Euclidean distance is invariant under reflection (analytic geometry)
    assert np.array_equal(img, img[::-1])
    assert np.array_equal(img, img[:, ::-1])


@pytest.mark.parametrize("seed", range(5))
def test_checker_cells_have_the_drawn_size_and_two_colours(seed):
    """Each full run along a row or column is one cell long; exactly two colours appear."""
    spec = BackgroundSpec(kind="checker", checker_cell=(3, 20))
    img, info = render_background(spec, H, W, rng=_rng(seed))
    cell = info["cell"]
    colours = {tuple(c) for c in np.unique(img.reshape(-1, 3), axis=0).tolist()}
    # definition of a checkerboard (common practice): two colours, alternating square cells
    assert colours == {tuple(c) for c in info["colours"]}
    for line in (img[H // 2, :, :], img[:, W // 2, :]):
        change = np.flatnonzero(np.any(line[1:] != line[:-1], axis=1)) + 1
        runs = np.diff(change)  # interior runs only: the first and last may be cut
        assert len(runs) > 0
        assert (runs == cell).all()
    # the pattern repeats after two cells along both axes
    assert np.array_equal(img[:, 2 * cell :], img[:, : W - 2 * cell])
    assert np.array_equal(img[2 * cell :], img[: H - 2 * cell])


def test_checker_offset_shifts_the_pattern():
    """An offset of (ox, oy) equals the unshifted board read ox columns and oy rows further on."""
    base = checker(40, 50, (0, 0, 0), (255, 255, 255), 6)
    shifted = checker(30, 40, (0, 0, 0), (255, 255, 255), 6, (5, 3))
    # translation of a pattern (analytic geometry)
    assert np.array_equal(shifted, base[3:33, 5:45])


@pytest.mark.parametrize("period", [6, 9, 16])
def test_stripes_are_periodic_with_the_drawn_period(period):
    """Vertical stripes repeat after exactly `period` columns and are constant down a column."""
    spec = BackgroundSpec(kind="stripes", stripe_period=(period, period), stripe_angle=(0, 0))
    img, info = render_background(spec, H, W, rng=_rng(period))
    assert info["period"] == period
    diff = np.abs(img[:, period:].astype(int) - img[:, :-period].astype(int))
    # definition of a periodic pattern (common practice); 1 level for float32 rounding
    assert diff.max() <= 1
    assert (img == img[:1]).all()


def test_stripes_diagonal_period():
    """At 45 degrees a period of 10*sqrt(2) px repeats after a shift of 10 px in x and y."""
    img = stripes(80, 90, (0, 0, 0), (200, 100, 50), 10 * math.sqrt(2), 45.0, 0.4, 2.0)
    # u = (x + y) / sqrt(2) grows by 20 / sqrt(2) = 10 sqrt(2) for a (10, 10) shift (analytic geometry)
    diff = np.abs(img[10:, 10:].astype(int) - img[:-10, :-10].astype(int))
    assert diff.max() <= 1
    # and along the stripes (shift (10, -10)) the canvas is unchanged
    diff = np.abs(img[:-10, 10:].astype(int) - img[10:, :-10].astype(int))
    assert diff.max() <= 1


@pytest.mark.parametrize(
    ("period", "duty", "phase"),
    [(12.0, 0.3, 1.7), (8.0, 0.05, 0.3), (8.0, 0.95, 5.2), (2.0, 0.5, 0.25), (5.0, 0.9, 0.0)],
)
def test_stripes_coverage_equals_duty(period, duty, phase):
    """Averaged over whole periods, axis-aligned stripes give the second colour `duty` of the area."""
    width = int(round(period * 15))
    img = stripes(4, width, (0, 0, 0), (255, 255, 255), period, 0.0, duty, phase)
    # pixel coverage of bands of width duty*P over a whole number of periods is duty
    # (area of a union of strips, analytic geometry); 0.5/255 per pixel of rounding
    assert abs(img[..., 0].mean() / 255 - duty) < 1 / 255


def test_stripes_thin_band_coverage_per_pixel():
    """A 0.4 px band inside one pixel gives that pixel weight 0.4 and its neighbours 0."""
    img = stripes(1, 8, (0, 0, 0), (250, 250, 250), 8.0, 0.0, 0.05, -2.3)
    # u = x - 2.3, so the band 0 <= u < 0.4 is x in [2.3, 2.7): inside pixel 2, [2, 3)
    # (analytic geometry; pixel coverage per synthgen.geometry)
    assert img[0, :, 0].tolist() == [0, 0, 100, 0, 0, 0, 0, 0]


def test_noise_spans_the_drawn_colours():
    """The noise field is stretched so its extremes take the two drawn colours."""
    img, info = render_background(BackgroundSpec(kind="noise"), H, W, rng=_rng(2))
    c0, c1 = np.array(info["colours"])
    for ch in range(3):
        lo, hi = sorted((c0[ch], c1[ch]))
        # the extremes of the stretched field map to the end colours, within 1 level
        # for the float32 -> uint8 rounding of the resized field
        assert abs(int(img[..., ch].min()) - lo) <= 1
        assert abs(int(img[..., ch].max()) - hi) <= 1
    assert len(np.unique(img[..., 0])) > min(20, abs(c1[0] - c0[0]))


def _high_share(field, sigma):
    """Share of the field's variance above a Gaussian low-pass of ``sigma`` px (scipy.ndimage)."""
    f = field - field.mean()
    low = ndimage.gaussian_filter(f, sigma, mode="reflect")
    return float(((f - low) ** 2).mean() / (f**2).mean())


def _mean_share(octaves, persistence, seeds=range(4)):
    shares = []
    for s in seeds:
        f = value_noise(256, 256, octaves=octaves, persistence=persistence, scale=64.0, rng=_rng(s))
        shares.append(_high_share(f.astype(np.float64), 4.0))
    return float(np.mean(shares))


def test_noise_detail_rises_with_persistence():
    """Fine-scale share of the variance grows as persistence grows (and falls as it falls)."""
    shares = [_mean_share(5, p) for p in (0.2, 0.5, 0.8)]
    # fractal noise (common practice): octave i carries amplitude persistence**i, so lower
    # persistence leaves less energy at fine scales; variance measured with scipy.ndimage
    assert shares[0] < shares[1] < shares[2]


def test_noise_detail_rises_with_octaves():
    """Each added octave adds fine-scale energy; a single octave has almost none below 4 px."""
    shares = [_mean_share(n, 0.6) for n in (1, 3, 5)]
    assert shares[0] < shares[1] < shares[2]
    # one octave on a 64 px lattice: a 4 px Gaussian low-pass keeps nearly everything
    assert shares[0] < 0.02


def test_noise_octave_variance_follows_persistence():
    """With two octaves, the fine octave's share of variance is p^2 / (1 + p^2) (within 25%)."""
    # Octave variances: coarse lattice spacing 64 px, fine 32 px; both are the same
    # interpolated uniform process, so var_i is proportional to amplitude_i**2 (derived).
    p = 0.7
    fine_share = []
    for s in range(6):
        rng = _rng(100 + s)
        coarse = value_noise(256, 256, octaves=1, persistence=p, scale=64.0, rng=rng)
        rng = _rng(100 + s)
        both = value_noise(256, 256, octaves=2, persistence=p, scale=64.0, rng=rng)
        # same first draws: the two-octave field is (coarse_up + p * fine) / (1 + p)
        fine = both * (1 + p) - coarse
        fine_share.append(fine.var() / (fine.var() + coarse.var()))
    expected = p**2 / (1 + p**2)
    assert abs(np.mean(fine_share) - expected) < 0.25 * expected


def test_noise_octaves_capped_at_pixel_lattice():
    """Octaves whose lattice would be finer than a pixel are not drawn, and the record says so."""
    spec = BackgroundSpec(kind="noise", octaves=8, noise_scale=(16, 16))
    _, info = render_background(spec, 64, 64, rng=_rng())
    # 64 / 16 = 4 lattice points; 4 * 2**4 = 64 <= 64 px, 4 * 2**5 > 64: five octaves (derived)
    assert info["octaves"] == 5 == noise_octaves_drawn(64, 64, 8, 16.0)


def test_noise_function_matches_render():
    """render_background's noise equals the pure function called with the recorded parameters."""
    rng = _rng(9)
    img, info = render_background(BackgroundSpec(kind="noise"), H, W, rng=rng)
    rng2 = _rng(9)
    rng2.random(7)  # the colour pair
    rng2.random()  # the scale
    again = noise(
        H, W, *info["colours"], octaves=5, persistence=0.5, scale=info["scale"], rng=rng2
    )
    assert np.array_equal(img, again)


def test_mix_picks_only_allowed_kinds():
    """`mix` draws only from its list, and draws each listed kind at some point."""
    spec = BackgroundSpec(kind="mix", mix=("checker", "stripes", "solid"))
    rng = _rng(11)
    kinds = [render_background(spec, 16, 16, rng=rng)[1]["kind"] for _ in range(60)]
    assert set(kinds) == {"checker", "stripes", "solid"}


def test_texture_adds_bounded_grey_offset():
    """A texture moves every channel of a solid canvas by the same amount, at most the amplitude."""
    spec = BackgroundSpec(kind="solid", brightness=(0.5, 0.5), texture=(12.0, 12.0))
    img, info = render_background(spec, H, W, rng=_rng(4))
    base = np.array(solid(1, 1, info["colour"])[0, 0], int)
    d = img.astype(int) - base
    assert info["texture"] == 12.0
    assert np.abs(d).max() <= 13  # amplitude plus cubic overshoot and rounding (about 1 level)
    assert d.std() > 1.0
    assert (np.abs(d - d[..., :1]) <= 1).all()


def test_solid_worked_example():
    """solid() fills every pixel with the given colour."""
    img = solid(3, 4, (1, 2, 3))
    assert (img == np.array([1, 2, 3], np.uint8)).all()


def test_lists_become_tuples():
    """TOML arrays (Python lists) are accepted for range fields and stored as tuples."""
    spec = BackgroundSpec(checker_cell=[4, 8], mix=["solid"])
    assert spec.checker_cell == (4, 8)
    assert spec.mix == ("solid",)


@pytest.mark.parametrize(
    ("kwargs", "key"),
    [
        ({"kind": "plaid"}, "background.kind"),
        ({"mix": ("solid", "mix")}, "background.mix"),
        ({"mix": ("nosie",)}, "background.mix"),
        ({"mix": ()}, "background.mix"),
        ({"brightness": (0.5, 1.2)}, "background.brightness"),
        ({"saturation": (0.6, 0.2)}, "background.saturation"),
        ({"contrast": (-0.1, 0.2)}, "background.contrast"),
        ({"radial_reach": (0.0, 1.0)}, "background.radial_reach"),
        ({"octaves": 0}, "background.octaves"),
        ({"octaves": 2.5}, "background.octaves"),
        ({"persistence": 1.5}, "background.persistence"),
        ({"noise_scale": (8.0, 4.0)}, "background.noise_scale"),
        ({"checker_cell": (2.5, 4)}, "background.checker_cell"),
        ({"stripe_period": (1.0, 4.0)}, "background.stripe_period"),
        ({"stripe_duty": (0.0, 0.5)}, "background.stripe_duty"),
        ({"stripe_angle": ("a", 3)}, "background.stripe_angle"),
        ({"texture": (0.0, 300.0)}, "background.texture"),
        ({"texture_scale": 0.5}, "background.texture_scale"),
    ],
)
def test_spec_validation_names_the_key(kwargs, key):
    """Each bad value raises ConfigError naming its full dotted key."""
    # STYLE.md (attrs habit): messages name the field, the rule and the value
    with pytest.raises(ConfigError, match=rf"'{key}' must .* \(got "):
        BackgroundSpec(**kwargs)


def test_misspelt_kind_gets_a_suggestion():
    """A near-miss kind name is answered with the closest valid one."""
    with pytest.raises(ConfigError, match="did you mean 'stripes'"):
        BackgroundSpec(kind="stripe")


def test_every_schema_background_kind_has_one_drawer():
    """The schema's background kinds (config.py) and the drawers of scene/backgrounds.py name the same kinds."""
    from synthgen.config import BACKGROUND_KINDS
    from synthgen.scene import backgrounds

    assert tuple(backgrounds._DRAW) == BACKGROUND_KINDS[:-1]  # "mix" draws one of the others
