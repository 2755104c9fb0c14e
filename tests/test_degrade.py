"""Tests for synthgen.scene.degrade: each degradation against an outside reference, and the pipeline."""

import io
import json
import math

import cv2
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from PIL import Image
from scipy import stats
from skimage.filters import gaussian as sk_gaussian

from synthgen.errors import ConfigError
from synthgen.scene.backgrounds import BackgroundSpec, render_background
from synthgen.scene.degrade import (
    DEGRADE_ORDER,
    BlurSpec,
    BrightnessSpec,
    ContrastSpec,
    DegradeSpec,
    JpegSpec,
    NoiseSpec,
    VignetteSpec,
    add_noise,
    adjust_brightness,
    adjust_contrast,
    degrade,
    gaussian_blur,
    jpeg_roundtrip,
    vignette,
)

H, W = 120, 160


def _rng(seed=0):
    return np.random.default_rng(seed)


def _scene(seed=0, h=H, w=W):
    """A textured test image: a noise background with some fine detail on top."""
    img, _ = render_background(BackgroundSpec(kind="mix"), h, w, rng=_rng(seed))
    detail = _rng(seed + 1).normal(0, 25, (h, w, 3)).astype(np.float32)
    return cv2.add(img, detail, dtype=cv2.CV_8U)


def _all_on(**overrides):
    parts = dict(
        noise=NoiseSpec(p=1.0),
        blur=BlurSpec(p=1.0),
        jpeg=JpegSpec(p=1.0),
        brightness=BrightnessSpec(p=1.0),
        contrast=ContrastSpec(p=1.0),
        vignette=VignetteSpec(p=1.0),
    )
    parts.update(overrides)
    return DegradeSpec(**parts)


# --------------------------------------------------------------------------- noise


@pytest.mark.parametrize("sigma", [2.0, 5.0, 8.0])
def test_noise_std_matches_sigma(sigma):
    """Noise on mid grey has mean 0 and std sqrt(sigma^2 + 1/12) within 5 standard errors."""
    img = np.full((480, 640, 3), 128, np.uint8)
    d = add_noise(img, sigma, rng=_rng(int(sigma))).astype(np.float64) - 128
    n = d.size
    # Rounding to integers adds uniform quantization error of variance 1/12 (Sheppard's
    # correction, textbook statistics); clipping needs a deviation of at least 127, i.e.
    # 16 sigma at sigma = 8, so it never happens here.
    expected = math.sqrt(sigma**2 + 1 / 12)
    # standard error of a sample std of n normal values is about std / sqrt(2 n)
    # (textbook statistics); 5 SE gives a false-failure chance below 1e-6
    assert abs(d.std() - expected) < 5 * expected / math.sqrt(2 * n)
    assert abs(d.mean()) < 5 * expected / math.sqrt(n)


def test_noise_values_are_uncorrelated():
    """Neighbouring pixels and channels carry uncorrelated noise (|r| under 5 / sqrt(n))."""
    img = np.full((480, 640, 3), 128, np.uint8)
    d = add_noise(img, 6.0, rng=_rng(1)).astype(np.float64) - 128
    pairs = [
        (d[:, 1:], d[:, :-1]),  # horizontal neighbours
        (d[1:], d[:-1]),  # vertical neighbours
        (d[..., 0], d[..., 1]),  # channels of one pixel
    ]
    for a, b in pairs:
        r = np.corrcoef(a.ravel(), b.ravel())[0, 1]
        # the sample correlation of independent values has SE 1 / sqrt(n) (textbook statistics)
        assert abs(r) < 5 / math.sqrt(a.size)


def test_noise_is_gaussian():
    """The rounded noise values follow the discretized normal law (chi-square, p > 1e-3)."""
    sigma = 12.0
    img = np.full((480, 640, 3), 128, np.uint8)
    d = add_noise(img, sigma, rng=_rng(2)).astype(np.int64).ravel() - 128
    k = np.arange(-40, 41)  # +-3.3 sigma; outer values pooled into the two end bins
    counts = np.array(
        [(d <= k[0]).sum()] + [(d == v).sum() for v in k[1:-1]] + [(d >= k[-1]).sum()]
    )
    cdf = stats.norm.cdf(np.r_[-np.inf, k[:-1] + 0.5, np.inf], scale=sigma)
    expected = np.diff(cdf) * d.size
    # Pearson's chi-square goodness of fit (scipy.stats) against round(N(0, sigma^2))
    assert stats.chisquare(counts, expected).pvalue > 1e-3


def test_noise_depends_on_rng_only():
    """The same generator state gives the same noise; another state gives other noise."""
    img = _scene()
    a = add_noise(img, 4.0, rng=_rng(5))
    b = add_noise(img, 4.0, rng=_rng(5))
    c = add_noise(img, 4.0, rng=_rng(6))
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)


def test_noise_saturates():
    """Noise on black and white stays in [0, 255] and pushes only inwards."""
    img = np.zeros((64, 64, 3), np.uint8)
    img[:, 32:] = 255
    out = add_noise(img, 20.0, rng=_rng(3))
    # uint8 saturation (common practice): values clip, never wrap around
    assert out[:, :32].min() == 0 and out[:, :32].mean() > 5
    assert out[:, 32:].max() == 255 and out[:, 32:].mean() < 250


def test_noise_on_image_larger_than_bank():
    """An image larger than the noise bank still gets noise of the right std."""
    img = np.full((8, 2000, 3), 128, np.uint8)
    d = add_noise(img, 5.0, rng=_rng(4)).astype(np.float64) - 128
    expected = math.sqrt(25 + 1 / 12)
    assert abs(d.std() - expected) < 5 * expected / math.sqrt(2 * d.size)


# --------------------------------------------------------------------------- blur


@pytest.mark.parametrize("sigma", [0.5, 0.9, 1.5, 3.0])
def test_blur_matches_scikit_image(sigma):
    """Blur equals skimage.filters.gaussian (reflect, truncate 4) rounded to nearest."""
    img = _scene(3)
    out = gaussian_blur(img, sigma).astype(np.float64)
    ref = sk_gaussian(
        img.astype(np.float64), sigma=sigma, mode="reflect", truncate=4.0,
        preserve_range=True, channel_axis=-1,
    )  # fmt: skip
    # Reference library: scikit-image.  Tolerance: our output is the float result rounded
    # to an integer (error <= 0.5) plus float32 accumulation error (< 1e-3 for a kernel of
    # at most 25 taps per pass on values <= 255, from a relative eps of 6e-8 per term).
    err = np.abs(out - ref)
    assert err.max() <= 0.5 + 1e-3
    # rounding error of a continuous value is uniform on [-0.5, 0.5]: mean |err| = 1/4
    assert abs(err.mean() - 0.25) < 0.02


def test_blur_zero_sigma_is_identity():
    """A sigma of 0 returns an equal copy."""
    img = _scene()
    out = gaussian_blur(img, 0.0)
    assert np.array_equal(out, img) and out is not img


def test_blur_keeps_mean_of_constant_image():
    """Blurring a constant image changes nothing (a normalized kernel; common practice)."""
    img = np.full((30, 40, 3), 77, np.uint8)
    assert np.array_equal(gaussian_blur(img, 2.0), img)


# --------------------------------------------------------------------------- jpeg


@pytest.mark.parametrize("quality", [20, 55, 90])
def test_jpeg_equals_decoding_an_encode_at_that_quality(quality):
    """The round trip equals Pillow decoding OpenCV's JPEG bytes, and Pillow's own round trip."""
    img = _scene(4)
    out = jpeg_roundtrip(img, quality)
    ok, data = cv2.imencode(
        ".jpg", cv2.cvtColor(img, cv2.COLOR_RGB2BGR), [cv2.IMWRITE_JPEG_QUALITY, quality]
    )
    assert ok
    # Reference decoder: Pillow (libjpeg) reading the bytes of an OpenCV encode.
    ref = np.asarray(Image.open(io.BytesIO(data.tobytes())).convert("RGB"))
    assert np.array_equal(out, ref)
    # Reference encoder too: Pillow at the same quality (default 4:2:0 subsampling, standard
    # IJG tables).  Both wrap libjpeg; allow 1 level for a different IDCT build.
    buf = io.BytesIO()
    Image.fromarray(img).save(buf, format="JPEG", quality=quality)
    pil = np.asarray(Image.open(io.BytesIO(buf.getvalue())).convert("RGB")).astype(int)
    assert np.abs(out.astype(int) - pil).max() <= 1


def test_jpeg_error_grows_as_quality_falls():
    """Lower quality loses more: mean error at q=20 > q=55 > q=90 (JPEG quantization; common practice)."""
    img = _scene(5)
    errs = [np.abs(jpeg_roundtrip(img, q).astype(int) - img).mean() for q in (20, 55, 90)]
    assert errs[0] > errs[1] > errs[2] > 0


# --------------------------------------------------------------------------- brightness, contrast


@pytest.mark.parametrize("offset", [-300.0, -51.75, -0.5, 0.0, 1.5, 37.25, 300.0])
def test_brightness_exact_with_saturation(offset):
    """Brightness is clip(rint(v + offset), 0, 255) exactly, for every value 0..255."""
    img = np.arange(256, dtype=np.uint8).reshape(1, 256, 1).repeat(3, axis=2)
    out = adjust_brightness(img, offset)
    # exact arithmetic in float64 with round-half-to-even and uint8 saturation (IEEE 754 / numpy)
    expected = np.clip(np.rint(img.astype(np.float64) + offset), 0, 255).astype(np.uint8)
    assert np.array_equal(out, expected)


@pytest.mark.parametrize(("gain", "pivot"), [(0.5, 100.0), (1.7, 64.25), (3.0, 200.0), (0.0, 12.4)])
def test_contrast_exact_with_saturation(gain, pivot):
    """Contrast is clip(rint(pivot + gain (v - pivot)), 0, 255) exactly."""
    img = np.arange(256, dtype=np.uint8).reshape(1, 256, 1).repeat(3, axis=2)
    out = adjust_contrast(img, gain, pivot)
    v = img.astype(np.float64)
    expected = np.clip(np.rint(pivot + gain * (v - pivot)), 0, 255).astype(np.uint8)
    assert np.array_equal(out, expected)


def test_contrast_default_pivot_is_image_mean():
    """Without a pivot, gain 0 flattens the image to its mean grey level."""
    img = _scene(6)
    out = adjust_contrast(img, 0.0)
    # arithmetic mean over all values (numpy.mean as reference)
    assert (out == np.uint8(np.rint(img.mean()))).all()
    assert np.array_equal(adjust_contrast(img, 1.0), img)


# --------------------------------------------------------------------------- vignette


@pytest.mark.parametrize(("h", "w"), [(120, 160), (121, 161), (3, 3)])
def test_vignette_darkens_corners_not_centre(h, w):
    """Corners lose about `strength` of their value; the centre pixel is nearly unchanged."""
    s = 0.4
    img = np.full((h, w, 3), 200, np.uint8)
    out = vignette(img, s).astype(np.float64)
    cy, cx = h // 2, w // 2
    # centre pixel: gain 1 - s * (r / r_corner)^2 with r <= 0.71 px (analytic geometry)
    assert abs(out[cy, cx, 0] - 200) <= 1
    for r, c in ((0, 0), (0, w - 1), (h - 1, 0), (h - 1, w - 1)):
        assert (out[r, c] < out[cy, cx]).all()
        # the corner pixel's centre is half a pixel in from the corner (ARCHITECTURE.md
        # coordinates): its gain is 1 - s * ((W/2 - 1/2)^2 + (H/2 - 1/2)^2) / ((W/2)^2 + (H/2)^2)
        frac = ((w / 2 - 0.5) ** 2 + (h / 2 - 0.5) ** 2) / ((w / 2) ** 2 + (h / 2) ** 2)
        assert abs(out[r, c, 0] - 200 * (1 - s * frac)) <= 0.5 + 1e-3


def test_vignette_depends_on_distance_from_centre():
    """The gain is symmetric under flips and falls monotonically with distance from the centre."""
    img = np.full((60, 80, 3), 250, np.uint8)
    out = vignette(img, 0.8)
    # reflection symmetry of a radial law (analytic geometry)
    assert np.array_equal(out, out[::-1]) and np.array_equal(out, out[:, ::-1])
    y, x = np.mgrid[0:60, 0:80]
    dist = np.hypot(x + 0.5 - 40, y + 0.5 - 30).ravel()
    vals = out[..., 0].ravel()[np.argsort(dist, kind="stable")].astype(int)
    assert np.all(np.minimum.accumulate(vals) - vals >= -1)


# --------------------------------------------------------------------------- pipeline


def test_all_p_zero_returns_equal_copy_and_draws_12():
    """With every p == 0 the image comes back equal (a new array) after exactly 12 uniforms."""
    img = _scene(7)
    rng, ref = _rng(8), _rng(8)
    out, applied = degrade(img, DegradeSpec(), rng=rng)
    assert np.array_equal(out, img) and out is not img
    assert applied == {}
    ref.random(12)
    # numpy.random: equal bit-generator states mean the same future stream
    assert rng.bit_generator.state == ref.bit_generator.state


def test_all_on_records_every_degradation_in_order():
    """With every p == 1 all six apply, recorded in the documented order with drawn values in range."""
    img = _scene(9)
    spec = _all_on()
    out, applied = degrade(img, spec, rng=_rng(10))
    assert tuple(applied) == DEGRADE_ORDER
    assert json.loads(json.dumps(applied)) == applied  # JSON-able (Python json module)
    assert spec.noise.sigma[0] <= applied["noise"]["sigma"] <= spec.noise.sigma[1]
    assert spec.blur.sigma[0] <= applied["blur"]["sigma"] <= spec.blur.sigma[1]
    assert spec.jpeg.quality[0] <= applied["jpeg"]["quality"] <= spec.jpeg.quality[1]
    assert isinstance(applied["jpeg"]["quality"], int)
    assert not np.array_equal(out, img)


def test_pipeline_equals_functions_in_order():
    """degrade() equals calling the six functions by hand with the recorded parameters."""
    img = _scene(11)
    out, a = degrade(img, _all_on(), rng=_rng(12))
    rng = _rng(12)
    rng.random(12)
    x = adjust_brightness(img, a["brightness"]["offset"])
    x = adjust_contrast(x, a["contrast"]["gain"], a["contrast"]["pivot"])
    x = vignette(x, a["vignette"]["strength"])
    x = gaussian_blur(x, a["blur"]["sigma"])
    x = add_noise(x, a["noise"]["sigma"], rng=rng)
    x = jpeg_roundtrip(x, a["jpeg"]["quality"])
    assert np.array_equal(out, x)


def test_toggling_one_degradation_keeps_the_others_parameters():
    """Turning blur off leaves every other drawn parameter unchanged."""
    img = _scene(13)
    _, with_blur = degrade(img, _all_on(), rng=_rng(14))
    _, without = degrade(img, _all_on(blur=BlurSpec(p=0.0)), rng=_rng(14))
    del with_blur["blur"]
    with_blur["contrast"].pop("pivot")
    without["contrast"].pop("pivot")
    assert with_blur == without


@pytest.mark.parametrize("size", [(1, 1), (1, 9), (7, 1), (5, 6), (H, W)])
def test_shape_dtype_kept_and_input_untouched(size):
    """Every degradation keeps shape and dtype and never writes to its input."""
    img = _scene(15, *size)
    before = img.copy()
    out, _ = degrade(img, _all_on(), rng=_rng(16))
    assert out.shape == img.shape and out.dtype == np.uint8
    assert np.array_equal(img, before)
    for f in (
        lambda i: adjust_brightness(i, 20),
        lambda i: adjust_contrast(i, 1.5),
        lambda i: vignette(i, 0.5),
        lambda i: gaussian_blur(i, 2.0),
        lambda i: add_noise(i, 5.0, rng=_rng()),
        lambda i: jpeg_roundtrip(i, 40),
    ):
        o = f(img)
        assert o.shape == img.shape and o.dtype == np.uint8 and o is not img
        assert np.array_equal(img, before)


def test_probability_gates_about_p():
    """A degradation with p = 0.3 applies to 0.3 of images within 5 binomial SDs."""
    img = np.full((4, 4, 3), 100, np.uint8)
    spec = DegradeSpec(brightness=BrightnessSpec(p=0.3))
    rng = _rng(17)
    n = 2000
    hits = sum("brightness" in degrade(img, spec, rng=rng)[1] for _ in range(n))
    # binomial SD sqrt(n p (1 - p)) (textbook statistics)
    assert abs(hits - 0.3 * n) < 5 * math.sqrt(n * 0.3 * 0.7)


def test_jpeg_quality_range_includes_both_ends():
    """The integer quality range [30, 31] draws both 30 and 31."""
    img = np.full((8, 8, 3), 100, np.uint8)
    spec = DegradeSpec(jpeg=JpegSpec(p=1.0, quality=(30, 31)))
    rng = _rng(18)
    qs = {degrade(img, spec, rng=rng)[1]["jpeg"]["quality"] for _ in range(50)}
    assert qs == {30, 31}


def test_bad_image_rejected():
    """A float or single-channel array is refused with ValueError naming the rule."""
    with pytest.raises(ValueError, match=r"uint8 array of shape \(H, W, 3\)"):
        adjust_brightness(np.zeros((4, 4, 3), np.float32), 1.0)
    with pytest.raises(ValueError, match=r"uint8 array of shape \(H, W, 3\)"):
        degrade(np.zeros((4, 4), np.uint8), DegradeSpec(), rng=_rng())


@pytest.mark.parametrize(
    ("make", "key"),
    [
        (lambda: NoiseSpec(p=1.5), "degrade.noise.p"),
        (lambda: NoiseSpec(sigma=(-1.0, 2.0)), "degrade.noise.sigma"),
        (lambda: BlurSpec(sigma=(2.0, 1.0)), "degrade.blur.sigma"),
        (lambda: BlurSpec(p=-0.1), "degrade.blur.p"),
        (lambda: JpegSpec(quality=(0, 50)), "degrade.jpeg.quality"),
        (lambda: JpegSpec(quality=(30.5, 50)), "degrade.jpeg.quality"),
        (lambda: BrightnessSpec(offset=(-300.0, 0.0)), "degrade.brightness.offset"),
        (lambda: ContrastSpec(gain=(-1.0, 1.0)), "degrade.contrast.gain"),
        (lambda: VignetteSpec(strength=(0.2, 1.5)), "degrade.vignette.strength"),
        (lambda: VignetteSpec(p="often"), "degrade.vignette.p"),
        (lambda: DegradeSpec(noise=BlurSpec()), "degrade.noise"),
    ],
)
def test_spec_validation_names_the_key(make, key):
    """Each bad value raises ConfigError naming its full dotted key."""
    # STYLE.md (attrs habit): messages name the field, the rule and the value
    with pytest.raises(ConfigError, match=rf"'{key}' must .* \(got "):
        make()


def test_lists_become_tuples():
    """TOML arrays (Python lists) are accepted for range fields and stored as tuples."""
    assert JpegSpec(quality=[40, 60]).quality == (40, 60)
    assert NoiseSpec(sigma=[1.0, 2.0]).sigma == (1.0, 2.0)


@settings(max_examples=40, deadline=None)
@given(
    h=st.integers(1, 40),
    w=st.integers(1, 40),
    seed=st.integers(0, 2**32 - 1),
    ps=st.lists(st.sampled_from([0.0, 0.5, 1.0]), min_size=6, max_size=6),
)
def test_any_size_and_probabilities_keep_shape_and_input(h, w, seed, ps):
    """For any size and mix of probabilities: same shape and dtype, input untouched, known keys."""
    img = _rng(seed).integers(0, 256, (h, w, 3), dtype=np.uint8)
    before = img.copy()
    spec = DegradeSpec(
        brightness=BrightnessSpec(p=ps[0]),
        contrast=ContrastSpec(p=ps[1]),
        vignette=VignetteSpec(p=ps[2]),
        blur=BlurSpec(p=ps[3]),
        noise=NoiseSpec(p=ps[4]),
        jpeg=JpegSpec(p=ps[5]),
    )
    out, applied = degrade(img, spec, rng=_rng(seed))
    assert out.shape == (h, w, 3) and out.dtype == np.uint8
    assert np.array_equal(img, before)
    # applied keys keep the documented order
    assert list(applied) == [k for k in DEGRADE_ORDER if k in applied]
    # a degradation with p == 1 always applies, p == 0 never
    names = ("brightness", "contrast", "vignette", "blur", "noise", "jpeg")
    for name, p in zip(names, ps):
        if p == 1.0:
            assert name in applied
        if p == 0.0:
            assert name not in applied
