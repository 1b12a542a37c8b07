"""The synthetic demo series: shapes, determinism, truth, and physics checks."""

import json
import re

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.special import gammaln

import saxsnb
from saxsnb import demo
from saxsnb.analysis import _reflections as reflections
from saxsnb.demo import flow_growth, phase_ramp, unfolding
from saxsnb.demo._common import debye_chain, sphere_form_factor
from saxsnb.errors import SaxsInputError

SHAPES = {"phase-ramp": (141, 1000), "flow-growth": (60, 500), "unfolding": (41, 600)}
SCANS = {"phase-ramp": ("temperature", "degC"), "flow-growth": ("position", "mm"),
         "unfolding": ("denaturant", "M")}


@pytest.fixture(scope="module")
def made():
    return {name: demo.make_series(name, seed=7) for name in demo.SCENARIOS}


def test_scenarios_listed():
    assert demo.SCENARIOS == ("phase-ramp", "flow-growth", "unfolding")


@pytest.mark.parametrize("name", list(SHAPES))
def test_layout_and_shapes(made, name):
    series, background = made[name]
    for ds in (series, background):
        saxsnb.validate(ds)
        assert (ds.sizes["frame"], ds.sizes["q"]) == SHAPES[name]
        scan, unit = SCANS[name]
        assert ds[scan].attrs["units"] == unit
        assert ds.saxs.scan == scan
        assert ds["q"].attrs["units"] == "1/nm"
        assert np.all(ds["sigma"].values > 0)
        assert np.all(np.isfinite(ds["intensity"].values))
        assert "fictional" in ds.attrs["sample"]
    np.testing.assert_array_equal(series["q"].values, background["q"].values)
    np.testing.assert_array_equal(series[scan].values, background[scan].values)
    expected_unit = "arb" if name == "phase-ramp" else "1/cm"
    assert series["intensity"].attrs["units"] == expected_unit
    assert "truth" in series.attrs and "truth" not in background.attrs
    assert json.loads(series.attrs["history"][-1])["operation"] == "demo.make_series"


def test_phase_ramp_scan_and_grid(made):
    s, _ = made["phase-ramp"]
    np.testing.assert_allclose(s["temperature"].values, 20.0 + 0.5 * np.arange(141))
    q = s["q"].values
    assert q[0] == pytest.approx(0.3) and q[-1] == pytest.approx(5.0)
    np.testing.assert_allclose(np.diff(q), np.diff(q)[0])  # linear grid


@pytest.mark.parametrize("name", list(SHAPES))
def test_seed_determinism(name):
    a, ab = demo.make_series(name, seed=3)
    b, bb = demo.make_series(name, seed=3)
    c, _ = demo.make_series(name, seed=4)
    np.testing.assert_array_equal(a["intensity"].values, b["intensity"].values)
    np.testing.assert_array_equal(ab["intensity"].values, bb["intensity"].values)
    assert not np.array_equal(a["intensity"].values, c["intensity"].values)
    assert a.attrs["truth"] == b.attrs["truth"]
    assert demo.truth(a)["seed"] == 3


@pytest.mark.parametrize("name", list(SHAPES))
def test_noise_follows_counting_statistics(name):
    noisy, nb = demo.make_series(name, seed=11)
    clean, cb = demo.make_series(name, seed=11, noise=False)
    cs = demo.truth(noisy)["counts_scale"]
    model = clean["intensity"].values
    # Poisson in its Gaussian limit: sigma = sqrt(I c) / c  (common practice)
    np.testing.assert_allclose(clean["sigma"].values, np.sqrt(model * cs) / cs, rtol=1e-12)
    z = (noisy["intensity"].values - model) / clean["sigma"].values
    assert abs(z.mean()) < 0.02 and 0.97 < z.std() < 1.03
    zb = (nb["intensity"].values - cb["intensity"].values) / cb["sigma"].values
    assert 0.97 < zb.std() < 1.03
    assert abs(np.corrcoef(z.ravel(), zb.ravel())[0, 1]) < 0.02  # independent measurements


def test_subtraction_gives_the_model_signal():
    s, b = demo.make_series("phase-ramp", noise=False)
    signal, _, _ = phase_ramp.signal_parts(s["q"].values, s["temperature"].values)
    np.testing.assert_allclose(s.saxs.subtract(b)["intensity"].values, signal, rtol=1e-10, atol=1e-9)


def test_truth_parsing_and_errors(made):
    t = demo.truth(made["phase-ramp"][0])
    assert isinstance(t["fractions"]["Pn3m"], np.ndarray)
    assert t["fractions"]["Pn3m"].shape == (141,)
    with pytest.raises(SaxsInputError, match="truth"):
        demo.truth(made["phase-ramp"][1])
    with pytest.raises(SaxsInputError, match="scenario"):
        demo.make_series("no-such-thing")
    with pytest.raises(SaxsInputError, match="colour") as info:
        demo.make_series("unfolding", colour="red")
    assert info.value.parameter == "colour"


# ---------------------------------------------------------------- phase-ramp truth
def test_phase_ramp_truth_consistent(made):
    s, _ = made["phase-ramp"]
    t = demo.truth(s)
    T = s["temperature"].values
    seq = t["phase_sequence"]
    assert seq == ["lamellar", "Ia3d", "Pn3m", "hexagonal"]
    F = np.stack([t["fractions"][p] for p in seq], axis=1)
    np.testing.assert_allclose(F.sum(axis=1), 1.0, atol=1e-12)
    assert np.all(F >= 0)
    for i in range(T.size):
        present = [p for k, p in enumerate(seq) if F[i, k] > 0]
        assert t["phases"][i] == present
        assert sorted(t["lattice_nm"][i]) == sorted(present)
    # the ramp starts lamellar and ends hexagonal; each window holds two phases
    assert t["phases"][0] == ["lamellar"] and t["phases"][-1] == ["hexagonal"]
    for win in t["coexistence"]:
        inside = (T > win["start"]) & (T < win["end"])
        assert inside.sum() >= 4  # 2.5 degC windows at 0.5 degC steps
        for i in np.flatnonzero(inside):
            assert t["phases"][i] == win["phases"]
        assert 1.5 <= win["end"] - win["start"] <= 4.0
    appears = {tr["phase"]: tr["appears"] for tr in t["transitions"]}
    vanishes = {tr["phase"]: tr["vanishes"] for tr in t["transitions"]}
    assert appears["lamellar"] is None and vanishes["hexagonal"] is None
    for a, b in zip(seq[:-1], seq[1:]):
        assert appears[b] < vanishes[a]  # overlap = coexistence
    # lattice parameters drift smoothly and shrink on heating (common practice for these phases)
    for p in seq:
        vals = np.array([lat[p] for lat in t["lattice_nm"] if p in lat])
        assert np.all(np.diff(vals) < 0) and np.max(np.abs(np.diff(vals))) < 0.05


def test_phase_ramp_bonnet_ratio_in_window(made):
    t = demo.truth(made["phase-ramp"][0])
    both = [lat for lat in t["lattice_nm"] if "Ia3d" in lat and "Pn3m" in lat]
    assert len(both) >= 4
    for lat in both:
        # Bonnet relation a(Ia3d)/a(Pn3m) = 1.576 (Anderson, Gruner & Leibler 1988, docs/REFERENCES.md)
        assert lat["Ia3d"] / lat["Pn3m"] == pytest.approx(1.576, abs=1e-9)


@pytest.mark.parametrize("temperature,phase", [(30.0, "lamellar"), (50.0, "Ia3d"),
                                               (67.0, "Pn3m"), (85.0, "hexagonal")])
def test_phase_ramp_peaks_at_allowed_reflections(temperature, phase):
    s, b = demo.make_series("phase-ramp", noise=False, temperature=[temperature])
    t = demo.truth(s)
    assert t["phases"][0] == [phase]
    q = s["q"].values
    I = s.saxs.subtract(b)["intensity"].values[0]
    step = q[1] - q[0]
    expected = reflections.q_positions(phase, t["lattice_nm"][0][phase], 4)
    expected = expected[expected < q[-1] - 0.05]
    assert expected.size >= 2
    for qk in expected:
        win = np.abs(q - qk) < 0.04
        assert abs(q[win][np.argmax(I[win])] - qk) <= step
    # ratios against published sequences (docs/REFERENCES.md, ITA Vol. A conditions)
    published = {"lamellar": [1, 4, 9, 16], "Ia3d": [6, 8, 14, 16], "Pn3m": [2, 3, 4, 6],
                 "hexagonal": [1, 3, 4, 7]}[phase]
    full = reflections.q_positions(phase, t["lattice_nm"][0][phase], 4)
    np.testing.assert_allclose((full / full[0]) ** 2, np.array(published) / published[0], rtol=1e-12)


def test_phase_ramp_coexistence_frame_has_both_phases():
    s, b = demo.make_series("phase-ramp", noise=False, temperature=[58.5])
    t = demo.truth(s)
    assert t["phases"][0] == ["Ia3d", "Pn3m"]
    q = s["q"].values
    I = s.saxs.subtract(b)["intensity"].values[0]
    for phase in ("Ia3d", "Pn3m"):
        qk = reflections.q_positions(phase, t["lattice_nm"][0][phase], 1)[0]
        win = np.abs(q - qk) < 0.03
        assert abs(q[win][np.argmax(I[win])] - qk) <= q[1] - q[0]


# ---------------------------------------------------------------- flow-growth truth
def test_flow_growth_truth(made):
    s, _ = made["flow-growth"]
    t = demo.truth(s)
    Rm, z = t["radius_mean_nm"], t["z"]
    assert Rm[0] == pytest.approx(2.0) and Rm[-1] == pytest.approx(12.0)
    assert np.all(np.diff(Rm) > 0) and 20 <= z.min() and z.max() <= 50
    # Kotlarchyk & Chen 1983 (docs/REFERENCES.md): Rg^2 = 3/5 Rm^2 (z+7)(z+8)/(z+1)^2
    np.testing.assert_allclose(t["rg_apparent_nm"] ** 2, 0.6 * Rm**2 * (z + 7) * (z + 8) / (z + 1) ** 2)
    # enough Guinier points even for the largest particles: q Rg < 1.3 (Guinier 1939, docs/REFERENCES.md)
    q = s["q"].values
    assert np.sum(q * t["rg_apparent_nm"].max() < 1.3) >= 30
    assert np.all(np.diff(np.log(q)) == pytest.approx(np.log(q[1] / q[0])))  # log grid


@pytest.mark.parametrize("Rm,z", [(2.0, 20.0), (7.0, 35.0), (12.0, 50.0)])
def test_schulz_rg_formula_by_quadrature(Rm, z):
    # <R^n> by direct numerical quadrature of the Schulz (gamma) distribution (scipy),
    # against the closed form of Kotlarchyk & Chen 1983, J. Chem. Phys. 79, 2461
    dist = stats.gamma(a=z + 1, scale=Rm / (z + 1))
    m6 = integrate.quad(lambda r: r**6 * dist.pdf(r), 0, np.inf)[0]
    m8 = integrate.quad(lambda r: r**8 * dist.pdf(r), 0, np.inf)[0]
    assert np.sqrt(0.6 * m8 / m6) == pytest.approx(float(flow_growth.rg_apparent_nm(Rm, z)), rel=1e-8)


def test_schulz_guinier_slope_of_noiseless_curve():
    # the Guinier slope of the model curve itself: ln I = ln I0 - q^2 Rg^2 / 3 at q -> 0
    positions = [0.0, 40.0, 118.0]
    s, b = demo.make_series("flow-growth", noise=False, position=positions,
                            q=np.linspace(0.002, 0.03, 200))
    t = demo.truth(s)
    I = s.saxs.subtract(b)["intensity"].values
    q = s["q"].values
    for i, rg in enumerate(t["rg_apparent_nm"]):
        sel = q * rg < 0.3
        slope = np.polyfit(q[sel] ** 2, np.log(I[i, sel]), 1)[0]
        # Kotlarchyk & Chen 1983 (docs/REFERENCES.md); fit bias at q Rg <= 0.3 is < 0.1 % (sphere table)
        assert np.sqrt(-3 * slope) == pytest.approx(rg, rel=2e-3)


def test_schulz_quadrature_converged():
    q = np.geomspace(0.03, 3.0, 60)
    Rm, z = np.array([2.0, 7.0, 12.0]), np.array([20.0, 35.0, 50.0])
    default = flow_growth.schulz_spheres(q, Rm, z)
    fine = flow_growth.schulz_spheres(q, Rm, z, n_radii=1500)
    np.testing.assert_allclose(default, fine, rtol=1e-8)
    # absolute scale: I(0) = phi drho^2 <V^2>/<V>, Schulz moments (Kotlarchyk & Chen 1983)
    I0 = flow_growth.schulz_spheres(np.array([1e-6]), Rm, z)[:, 0]
    # <R^n> = Rm^n Gamma(z+1+n) / (Gamma(z+1) (z+1)^n), docs/REFERENCES.md
    m6 = np.exp(gammaln(z + 7) - gammaln(z + 1) - 6 * np.log(z + 1)) * (Rm * 1e-7) ** 6
    m3 = np.exp(gammaln(z + 4) - gammaln(z + 1) - 3 * np.log(z + 1)) * (Rm * 1e-7) ** 3
    v2_over_v = (4 * np.pi / 3) * m6 / m3
    np.testing.assert_allclose(I0, 1e-3 * (2e11) ** 2 * v2_over_v, rtol=1e-6)


def test_schulz_monodisperse_limit_is_a_sphere():
    q = np.linspace(0.05, 3.0, 50)
    I = flow_growth.schulz_spheres(q, [5.0], [1e6], n_radii=101)[0]
    # Rayleigh sphere P(qR) normalised at q = 0 (Guinier & Fournet 1955)
    np.testing.assert_allclose(I / I[0], sphere_form_factor(q * 5.0) / sphere_form_factor(q[0] * 5.0),
                               rtol=2e-3, atol=1e-6)


# ---------------------------------------------------------------- unfolding truth
def test_unfolding_truth(made):
    s, _ = made["unfolding"]
    t = demo.truth(s)
    c = s["denaturant"].values
    f = t["unfolded_fraction"]
    assert c[0] == 0 and c[-1] == pytest.approx(6.0)
    assert np.all(np.diff(f) > 0) and f[0] < 0.01 and f[-1] > 0.99
    assert np.interp(0.5, f, c) == pytest.approx(t["midpoint_M"], abs=0.01)
    assert t["midpoint_M"] == pytest.approx(3.0)
    assert float(unfolding.unfolded_fraction(3.0)) == pytest.approx(0.5)
    # Guinier & Fournet (1955): Rg = sqrt(3/5) R for a sphere
    assert t["rg_folded_nm"] == pytest.approx(np.sqrt(0.6) * 2.5)
    assert 4.0 <= t["rg_unfolded_nm"] <= 5.0


def test_unfolding_noiseless_curve_limits():
    s, b = demo.make_series("unfolding", noise=False, q=np.array([1e-4, 1e-3, 0.01]),
                            denaturant=[0.0, 3.0, 6.0])
    t = demo.truth(s)
    I = s.saxs.subtract(b)["intensity"].values
    np.testing.assert_allclose(I[:, 0], t["i0_per_cm"], rtol=1e-6)  # P(0) = 1 for both forms
    # Guinier region of the mixture: Rg^2 is the fraction-weighted mean (same I0)
    slope = (np.log(I[:, 2]) - np.log(I[:, 1])) / (0.01**2 - 1e-3**2)
    np.testing.assert_allclose(np.sqrt(-3 * slope), t["rg_mixture_nm"], rtol=1e-3)


def test_closed_forms_against_references():
    # Debye 1947 (docs/REFERENCES.md, der): Kratky form x P at x = 1, 2, 5, 10
    x = np.array([1.0, 2.0, 5.0, 10.0])
    np.testing.assert_allclose(x * debye_chain(x), [0.7358, 1.1353, 1.6027, 1.8000], atol=1e-4)
    np.testing.assert_allclose(debye_chain(np.array([1e-4, 2e-3])),
                               2 * (np.exp(-np.array([1e-4, 2e-3])) + np.array([1e-4, 2e-3]) - 1)
                               / np.array([1e-4, 2e-3]) ** 2, rtol=1e-7)
    # sphere: first zero at x = 4.493409 (docs/REFERENCES.md)
    assert sphere_form_factor(np.array([4.493409]))[0] < 1e-12
    xs = np.array([0.005, 0.0101, 0.5])
    exact = (3 * (np.sin(xs) - xs * np.cos(xs)) / xs**3) ** 2
    np.testing.assert_allclose(sphere_form_factor(xs), exact, rtol=1e-6)


# ---------------------------------------------------------------- write_demo
def test_write_demo_folders(tmp_path):
    out = demo.write_demo(tmp_path / "demo", names=demo.SCENARIOS, seed=2)
    assert set(out) == set(demo.SCENARIOS)
    for name, folder in out.items():
        n = SHAPES[name][0]
        files = sorted(folder.glob("*.dat"))
        bg = sorted((folder / "background").glob("*.dat"))
        assert len(files) == n and len(bg) == n
        assert "Synthetic data" in (folder / "README.md").read_text()
        assert not list(folder.rglob("*.part"))
        scan, unit = SCANS[name]
        pattern = demo.files.FILE_NAMES[name][3]
        series, _ = demo.make_series(name, seed=2)
        for i in (0, n // 2, n - 1):
            text = files[i].read_text().splitlines()
            assert text[0] == f"# saxsnb series frame {i}"
            head = dict(line[2:].split(" = ", 1) for line in text[1:6])
            assert head["q_unit"] == "1/nm" and head[f"{scan}_units"] == unit
            assert head["intensity_unit"] == series["intensity"].attrs["units"]
            value = float(head[scan])
            assert value == pytest.approx(float(series[scan][i]), abs=1e-9)
            assert float(re.search(pattern, files[i].name).group(scan)) == pytest.approx(value)
            assert text[6] == "# q I sigma"
            data = np.loadtxt(files[i])
            np.testing.assert_allclose(data[:, 1], series["intensity"].values[i], rtol=1e-8)
            np.testing.assert_allclose(data[:, 0], series["q"].values, rtol=1e-8)


def test_write_demo_rejects_unknown_name(tmp_path):
    with pytest.raises(SaxsInputError, match="bogus"):
        demo.write_demo(tmp_path, names=["bogus"])
    assert not list(tmp_path.iterdir())


def test_demo_folder_reads_back(tmp_path):
    folders = demo.write_demo(tmp_path, names=["unfolding"], seed=4)
    folder = folders["unfolding"]
    series, background = demo.make_series("unfolding", seed=4)
    pattern = demo.files.FILE_NAMES["unfolding"][3]
    by_glob = saxsnb.read_series(str(folder / "*.dat"), scan="denaturant", pattern=pattern)
    by_folder = saxsnb.read_series(folder)  # the README beside the curves is not read
    bg = saxsnb.read_series(folder / "background")
    for ds in (by_glob, by_folder):
        np.testing.assert_allclose(ds["denaturant"].values, series["denaturant"].values)
        np.testing.assert_allclose(ds["intensity"].values, series["intensity"].values, rtol=1e-8)
        np.testing.assert_allclose(ds["sigma"].values, series["sigma"].values, rtol=1e-8)
        assert ds["intensity"].attrs["units"] == "1/cm"
        assert ds.attrs["sample"] == series.attrs["sample"]
    np.testing.assert_allclose(by_folder.saxs.subtract(bg)["intensity"].values,
                               series.saxs.subtract(background)["intensity"].values, atol=1e-9)
