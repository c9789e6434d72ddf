"""Torch adapter and torch analytic denoiser, checked against the numpy demo and published facts."""
from __future__ import annotations

import math
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest

torch = pytest.importorskip("torch")

from vocobench.analytic import DEMO_FRONTEND, AnalyticDenoiser  # noqa: E402
from vocobench.contracts import Plugin, load_plugin  # noqa: E402
from vocobench.errors import InputError  # noqa: E402
from vocobench.samplers import make_plan, run_plan  # noqa: E402
from vocobench.schedules import NoiseSchedule, ScheduleSpec, kong_fast6  # noqa: E402
from vocobench.torch_adapter import TorchDenoiser, TorchVocoder  # noqa: E402
from vocobench.torch_analytic import TorchAnalyticDenoiser, imdct, mdct, mdct_matrix  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
PIER01 = REPO / "scenarios" / "pier-announcements" / "testset" / "pier01.wav"
SCENARIO = REPO / "scenarios" / "torch-denoiser"
HOP = DEMO_FRONTEND.hop_length
# IEEE 754-2008 unit roundoffs u = 2^-p (p = significand bits incl. the hidden one, minus one):
# binary32 p = 24, binary16 p = 11; bfloat16 keeps 8 bits (Google's bfloat16 format description).
UNIT_ROUNDOFF = {"float32": 2.0 ** -24, "float16": 2.0 ** -11, "bfloat16": 2.0 ** -8}


@pytest.fixture(autouse=True, scope="module")
def one_thread():
    """One torch and one BLAS thread: spinning thread pools on a shared 2-core CI box are slow
    (common practice, no source)."""
    from threadpoolctl import threadpool_limits

    old = torch.get_num_threads()
    torch.set_num_threads(1)
    with threadpool_limits(1):
        yield
    torch.set_num_threads(old)


@pytest.fixture(scope="module")
def feats() -> np.ndarray:
    """Log-mel of the first 1.2 s of pier01 (speech from 0.1 s on)."""
    import soundfile as sf

    y, sr = sf.read(PIER01, dtype="float32")
    assert sr == DEMO_FRONTEND.sample_rate
    return DEMO_FRONTEND(y[: int(1.2 * sr)])


def rel(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.linalg.norm(np.asarray(a, np.float64) - b) / np.linalg.norm(b))


def schedules(training: NoiseSchedule) -> list[NoiseSchedule]:
    # 6 fractional steps (Kong et al. 2021 fast schedule: interpolated conditioning) and 25 integer
    # steps of a uniform stride (Song et al. 2021): both code paths of the step conditioning.
    return [kong_fast6(), ScheduleSpec("uniform", "stride", {"stride": "uniform"}).build(25, training)]


# -- the torch MDCT against its definition -----------------------------------------------------
def test_torch_mdct_is_the_princen_bradley_transform():
    # Princen & Bradley 1986: X_j[m] = √(2/n) Σ_k w[k] x[jn + k] cos(π/n (k + ½ + n/2)(m + ½)),
    # sine window; with 50 % overlap the transform is orthogonal (TDAC): x is recovered exactly
    # and energy is preserved. Here with circular extension (as vocobench.analytic).
    n, blocks = 8, 5
    x = np.random.default_rng(3).standard_normal((2, n * blocks))
    k = np.arange(2 * n)
    direct = np.empty((2, blocks, n))
    for j in range(blocks):
        seg = x[:, (j * n + k) % (n * blocks)] * np.sin(np.pi * (k + 0.5) / (2 * n))
        for m in range(n):
            direct[:, j, m] = math.sqrt(2 / n) * (seg @ np.cos(np.pi / n * (k + 0.5 + n / 2) * (m + 0.5)))
    basis = mdct_matrix(n)
    c = mdct(torch.from_numpy(x), basis)
    np.testing.assert_allclose(c.numpy(), direct, rtol=0, atol=1e-12)
    np.testing.assert_allclose(imdct(c, basis).numpy(), x, rtol=0, atol=1e-12)
    np.testing.assert_allclose(np.sum(c.numpy() ** 2), np.sum(x ** 2), rtol=1e-12)


# -- float32: one ε̂ call, then whole sampler runs ----------------------------------------------
@pytest.mark.parametrize("conditioning", ["step", "level"])
def test_one_noise_prediction_matches_numpy_demo(feats, conditioning):
    # The numpy demo works in float64 and rounds ε̂ to float32; the torch one runs in float32.
    # Bound: the longest inner products have 2n = 512 terms; rounding errors of independent sign
    # grow like √(2n)·u (Higham & Mary 2019, "A new approach to probabilistic rounding error
    # analysis", SIAM J. Sci. Comput.), u = 2^-24: √512·u ≈ 1.3e-6 relative.
    # For "level" t is √ᾱ itself: in float32 (the adapter's default t_dtype) √ᾱ = 0.99995 carries
    # an absolute error up to u, so 1 − ᾱ (1e-4) would be off by ~1e-3 relative before any
    # arithmetic. The numpy contract passes t as float64, so compare with t_dtype="float64".
    ref = AnalyticDenoiser(conditioning=conditioning)
    den = TorchDenoiser(TorchAnalyticDenoiser(conditioning=conditioning),
                        t_dtype="float64" if conditioning == "level" else "float32")
    bound = math.sqrt(2 * HOP) * UNIT_ROUNDOFF["float32"]
    rng = np.random.default_rng(11)
    x0 = ref.sample_prior(feats, rng)[None]
    for step in (0.0, 7.5, 500.0, 999.0):
        ab = float(ref.training_schedule.alpha_bars[int(step)])
        x_t = (math.sqrt(ab) * x0 + math.sqrt(1 - ab) * rng.standard_normal(x0.shape)).astype(np.float32)
        t = np.array([step if conditioning == "step" else math.sqrt(ab)])
        eps_ref = ref.predict_noise(x_t, feats[None], t)
        # The MDCT's rounding error is relative to ‖x_t‖, and the Wiener gain amplifies it by up
        # to 1/√(1−ᾱ) (at coefficients with P ≪ 1−ᾱ): scale the bound by the condition number
        # κ = ‖x_t‖ / (√(1−ᾱ)·‖ε̂‖) when it exceeds 1 (standard forward-error reasoning).
        kappa = np.linalg.norm(x_t) / (math.sqrt(1 - ab) * np.linalg.norm(eps_ref))
        assert rel(den.predict_noise(x_t, feats[None], t), eps_ref) < bound * max(1.0, kappa)


def float32_tolerance(ref: AnalyticDenoiser, plan, feats: np.ndarray, seed: int) -> float:
    """How far the numpy demo's own output moves when each ε̂ call is perturbed by √(2n)·u.

    Backward-error view: the float32 torch run is the exact run with every ε̂ off by at most the
    per-call bound above (asserted there), plus rounding of the state. So its deviation should be
    of the size that random relative ε̂ errors of that bound cause; allow twice that for the state
    rounding and because one random draw is not the worst case.
    """
    rho = math.sqrt(2 * HOP) * UNIT_ROUNDOFF["float32"]
    jitter = np.random.default_rng(99)
    n = DEMO_FRONTEND.expected_samples(feats.shape[1])

    def perturbed(x, f, t):
        eps = ref.predict_noise(x, f, t).astype(np.float64)
        return eps * (1 + rho * jitter.standard_normal(eps.shape))

    exact = run_plan(plan, ref.predict_noise, feats[None], n, np.random.default_rng(seed))
    moved = run_plan(plan, perturbed, feats[None], n, np.random.default_rng(seed), dtype=np.float64)
    return 2 * rel(moved, exact)


@pytest.mark.parametrize("sampler", ["ddpm", "ddim"])
def test_sampling_matches_numpy_demo(feats, sampler):
    numpy_demo = AnalyticDenoiser()
    ref = Plugin.wrap(numpy_demo)
    den = TorchDenoiser(TorchAnalyticDenoiser(), noise="numpy")
    plugin = Plugin.wrap(den)
    assert (plugin.kind, plugin.conditioning, plugin.version) == ("denoiser", "step", "analytic-torch-1")
    n = DEMO_FRONTEND.expected_samples(feats.shape[1])
    for schedule in schedules(ref.training_schedule):
        want = ref.synthesizer(sampler)(feats, schedule, np.random.default_rng(7))
        # (a) driven by the built-in numpy sampler, one copy per step
        via_numpy = plugin.synthesizer(sampler)(feats, schedule, np.random.default_rng(7))
        # (b) the torch-native loop with the same StepPlan and the same numpy draws
        plan = make_plan(sampler, schedule, "step", ref.training_schedule)
        via_torch = den.sample(plan, feats[None], n, np.random.default_rng(7))[0]
        tol = float32_tolerance(numpy_demo, plan, feats, 7)
        assert via_numpy.shape == via_torch.shape == want.shape == (n,)
        assert rel(via_numpy, want) < tol
        assert rel(via_torch, want) < tol
    # loop="numpy" hands the plan to run_plan: bit-identical to the numpy path of the same object
    den_np = TorchDenoiser(TorchAnalyticDenoiser(), loop="numpy")
    a = den_np.sample(plan, feats[None], n, np.random.default_rng(7))
    b = run_plan(plan, den_np.predict_noise, feats[None], n, np.random.default_rng(7))
    np.testing.assert_array_equal(a, b)


# -- half precision --------------------------------------------------------------------------
@pytest.mark.parametrize("dtype", ["float16", "bfloat16"])
@pytest.mark.parametrize("sampler", ["ddpm", "ddim"])
def test_half_precision_close_to_float32(feats, dtype, sampler):
    # In half precision x_t, the features, the MDCT matrix, the coefficients and ε̂ are each rounded
    # once (≈ u each, the CPU kernels accumulate in float32); at the lowest noise level the rounding
    # of x_t is amplified by ‖x_t‖/‖bε‖, about 5 for this signal. So one call is within ≈ 5u, and
    # independent errors of the nfe calls add in quadrature (Higham & Mary 2019): bound 5u·√nfe.
    u = UNIT_ROUNDOFF[dtype]
    try:
        half = TorchDenoiser(TorchAnalyticDenoiser(), dtype=dtype)
        half.predict_noise(np.zeros((1, 4 * HOP), np.float32), np.zeros((1, 80, 5), np.float32), [3.0])
    except RuntimeError as e:  # an op without a CPU kernel for this dtype in this torch build
        pytest.skip(f"torch {torch.__version__} CPU lacks {dtype}: {e}")
    full = TorchDenoiser(TorchAnalyticDenoiser())
    assert half.module.basis.dtype == getattr(torch, dtype)
    n = DEMO_FRONTEND.expected_samples(feats.shape[1])
    for schedule in schedules(full.training_schedule):
        plan = make_plan(sampler, schedule, "step", full.training_schedule)
        a = half.sample(plan, feats[None], n, np.random.default_rng(2))[0]
        b = full.sample(plan, feats[None], n, np.random.default_rng(2))[0]
        assert a.dtype == np.float32
        assert rel(a, b) < 5 * u * math.sqrt(plan.nfe)
        assert rel(a, b) > u / 4       # it really ran in half precision


# -- random numbers --------------------------------------------------------------------------
def test_torch_noise_is_seeded_per_item(feats):
    den = TorchDenoiser(TorchAnalyticDenoiser(), noise="torch")
    plan = make_plan("ddpm", kong_fast6(), "step", den.training_schedule)
    n = DEMO_FRONTEND.expected_samples(feats.shape[1])
    one = feats[None]
    a = den.sample(plan, one, n, np.random.default_rng(42))
    b = den.sample(plan, one, n, np.random.default_rng(42))
    c = den.sample(plan, one, n, np.random.default_rng(43))
    np.testing.assert_array_equal(a, b)                 # same seed, same device → same audio
    assert rel(c, a) > 0.1                              # another seed → other noise draws
    # per-item generators: item 0's audio does not depend on what else is in the batch
    two = np.stack([feats, feats[:, ::-1].copy()])
    pair = den.sample(plan, two, n, np.random.default_rng(42))
    np.testing.assert_allclose(pair[0], a[0], rtol=0, atol=1e-6)
    # the torch stream is not the numpy stream
    numpy_noise = TorchDenoiser(TorchAnalyticDenoiser(), noise="numpy")
    assert rel(numpy_noise.sample(plan, one, n, np.random.default_rng(42)), a) > 0.1


# -- device synchronisation and memory (no GPU needed) ----------------------------------------
class Bare(torch.nn.Module):
    """A parameter-free predictor: moving it to a device touches no memory."""

    sample_rate = DEMO_FRONTEND.sample_rate
    frontend = DEMO_FRONTEND
    conditioning = "level"

    def forward(self, x_t, features, t):
        return 0.5 * x_t


def test_synchronize_calls_cuda_only_on_cuda(monkeypatch):
    calls: list = []
    monkeypatch.setattr(torch.cuda, "is_available", lambda: True)
    monkeypatch.setattr(torch.cuda, "device_count", lambda: 1)
    monkeypatch.setattr(torch.cuda, "synchronize", lambda device=None: calls.append(("cuda", device)))
    monkeypatch.setattr(torch.cuda, "max_memory_allocated", lambda device=None: 12345)
    monkeypatch.setattr(torch.cuda, "reset_peak_memory_stats",
                        lambda device=None: calls.append(("reset", device)))
    monkeypatch.setattr(torch.backends.mps, "is_available", lambda: True)
    monkeypatch.setattr(torch.mps, "synchronize", lambda: calls.append(("mps", None)))

    cpu = Plugin.wrap(TorchDenoiser(Bare(), device="cpu"))
    cpu.synchronize()                                   # the timing phase calls Plugin.synchronize
    assert calls == []
    assert cpu.obj.peak_memory_bytes() is None
    cpu.obj.reset_peak_memory()
    assert calls == []

    cuda = Plugin.wrap(TorchDenoiser(Bare(), device="cuda"))
    cuda.synchronize()
    assert calls == [("cuda", torch.device("cuda"))]
    assert cuda.obj.peak_memory_bytes() == 12345
    cuda.obj.reset_peak_memory()
    assert calls[-1] == ("reset", torch.device("cuda"))

    calls.clear()
    TorchVocoder(Bare(), device="mps").synchronize()
    assert calls == [("mps", None)]


def test_cuda_unavailable_is_an_input_error(monkeypatch):
    monkeypatch.setattr(torch.cuda, "is_available", lambda: False)
    with pytest.raises(InputError, match="CUDA"):
        TorchDenoiser(Bare(), device="cuda")


# -- compilation, threads, description ---------------------------------------------------------
def test_compile_happens_on_first_call(monkeypatch):
    compiled: list = []

    def fake_compile(module, **kw):
        compiled.append(kw)
        return module

    monkeypatch.setattr(torch, "compile", fake_compile)
    den = TorchDenoiser(Bare(), compile=True, compile_options={"dynamic": True})
    assert compiled == []                               # not at construction
    x = np.ones((1, 2 * HOP), np.float32)
    np.testing.assert_allclose(den.predict_noise(x, np.zeros((1, 80, 3)), [0.5]), 0.5 * x)
    den.predict_noise(x, np.zeros((1, 80, 3)), [0.5])
    assert compiled == [{"dynamic": True}]              # once, on the first call


def test_threads_and_describe():
    old = torch.get_num_threads()
    try:
        den = TorchDenoiser(TorchAnalyticDenoiser(), threads=2, dtype="bfloat16")
        assert torch.get_num_threads() == 2
        den.set_threads(1)
        d = den.describe()
        assert (d["threads"], d["threads_requested"], d["device"], d["dtype"]) == (1, 1, "cpu", "bfloat16")
        assert d["torch"] == torch.__version__ and d["compile"] is False and d["noise"] == "numpy"
        with pytest.raises(InputError):
            den.set_threads(0)
    finally:
        torch.set_num_threads(old)


# -- loading -----------------------------------------------------------------------------------
class Scale(torch.nn.Module):
    sample_rate = DEMO_FRONTEND.sample_rate
    frontend = DEMO_FRONTEND.to_dict()
    conditioning = "level"

    def __init__(self):
        super().__init__()
        self.w = torch.nn.Parameter(torch.ones(()))

    def forward(self, x_t, features, t):
        return self.w * x_t


def test_factory_checkpoint_and_loader(tmp_path):
    trained = Scale()
    trained.w.data.fill_(0.25)
    path = tmp_path / "w.pt"
    torch.save(trained.state_dict(), path)
    x = np.ones((1, HOP), np.float32)
    f = np.zeros((1, 80, 2), np.float32)

    default = TorchDenoiser(Scale, checkpoint=path)            # factory + state dict
    np.testing.assert_allclose(default.predict_noise(x, f, [0.5]), 0.25)
    seen = []

    def loader(p, module):
        seen.append((p, module))
        m = Scale()
        m.load_state_dict(torch.load(p, weights_only=True))
        return m

    own = TorchDenoiser(checkpoint=str(path), loader=loader)   # the user's code builds it
    np.testing.assert_allclose(own.predict_noise(x, f, [0.5]), 0.25)
    assert seen == [(path, None)]
    assert own.version.startswith("Scale-") and own.version != TorchDenoiser(Scale).version

    with pytest.raises(InputError, match="not found"):
        TorchDenoiser(Scale, checkpoint=tmp_path / "missing.pt")
    with pytest.raises(InputError, match="without a checkpoint"):
        TorchDenoiser(Scale, loader=loader)
    with pytest.raises(InputError, match="nn.Module"):
        TorchDenoiser(lambda: object())
    with pytest.raises(InputError, match="dtype"):
        TorchDenoiser(Scale, dtype="float8")
    with pytest.raises(InputError, match="device"):
        TorchDenoiser(Scale, device="tpu")
    with pytest.raises(InputError, match="noise"):
        TorchDenoiser(Scale, noise="gpu")
    with pytest.raises(InputError, match="training_schedule|sample_rate"):
        TorchDenoiser(torch.nn.Identity())


def test_missing_torch_says_how_to_install(monkeypatch):
    monkeypatch.setitem(sys.modules, "torch", None)            # makes `import torch` fail
    with pytest.raises(InputError, match=r"pip install torch.*vocobench\[torch\]"):
        TorchDenoiser(Bare())


def test_core_modules_do_not_import_torch():
    code = ("import sys; import vocobench.contracts, vocobench.samplers, vocobench.torch_adapter; "
            "assert 'torch' not in sys.modules, 'torch imported'")
    subprocess.run([sys.executable, "-c", code], check=True, cwd=REPO, timeout=60)


# -- a module with its own loop, as a Vocoder ---------------------------------------------------
class OwnDDIM(torch.nn.Module):
    """Deterministic DDIM (Song et al. 2021, Eq. 12, σ = 0) written inside the module."""

    sample_rate = DEMO_FRONTEND.sample_rate
    frontend = DEMO_FRONTEND
    samplers = ["ddim"]

    def __init__(self):
        super().__init__()
        self.net = TorchAnalyticDenoiser(conditioning="level")

    def forward(self, features, betas, generator=None, sampler="ddim"):
        ab = torch.cumprod(1 - betas, 0)
        x = torch.randn(features.shape[-1] * HOP, generator=generator, dtype=betas.dtype)[None]
        for i in range(len(betas) - 1, -1, -1):
            a_prev = ab[i - 1] if i > 0 else torch.ones((), dtype=betas.dtype)
            eps = self.net(x, features, ab[i].sqrt()[None])
            x0 = (x - (1 - ab[i]).sqrt() * eps) / ab[i].sqrt()
            x = a_prev.sqrt() * x0 + (1 - a_prev).sqrt() * eps
        return x


def test_vocoder_with_its_own_loop(feats):
    voc = Plugin.wrap(TorchVocoder(OwnDDIM(), dtype="float64"))
    assert voc.kind == "vocoder" and voc.samplers() == ["ddim"]
    schedule = kong_fast6()
    y = voc.synthesizer("ddim")(feats, schedule, np.random.default_rng(5))
    assert y.shape == (DEMO_FRONTEND.expected_samples(feats.shape[1]),)
    np.testing.assert_array_equal(y, voc.synthesizer("ddim")(feats, schedule, np.random.default_rng(5)))
    # Same seed stream as TorchDenoiser(noise="torch"), but coefficients from make_plan rather than
    # the module's Eq. 12. In float64 (u = 2^-53 ≈ 1.1e-16) the per-call bound √512·u is 2.5e-15
    # and the sampler's sensitivity is a few times that (float32 case above): allow 1e-12.
    den = TorchDenoiser(TorchAnalyticDenoiser(conditioning="level"), noise="torch",
                        dtype="float64", t_dtype="model")
    plan = make_plan("ddim", schedule, "level", None)
    z = den.sample(plan, feats[None], len(y), np.random.default_rng(5))[0]
    assert y.dtype == z.dtype == np.float64
    assert rel(y, z) < 1e-12


# -- the worked example ------------------------------------------------------------------------
def test_scenario_config_runs(feats):
    cfg = tomllib.loads((SCENARIO / "config.toml").read_text())
    file, _, obj = cfg["vocoder"]["target"].rpartition(":")
    assert (SCENARIO / file).is_file()
    assert (SCENARIO / cfg["testset"]["path"]).is_file()
    plugin = load_plugin(f"{SCENARIO / file}:{obj}", cfg["vocoder"]["options"])
    assert plugin.kind == "denoiser" and set(cfg["sweep"]["samplers"]) <= set(plugin.samplers())
    spec = ScheduleSpec(**{"name": "uniform", "kind": "stride",
                           "options": {"stride": cfg["sweep"]["schedule"][0]["stride"]}})
    for steps in cfg["sweep"]["steps"]:
        y = plugin.synthesizer("ddim")(feats[:, :20], spec.build(steps, plugin.training_schedule),
                                       np.random.default_rng(0))
        assert y.shape == (20 * HOP,) and np.all(np.isfinite(y))
    assert plugin.obj.describe()["dtype"] == cfg["vocoder"]["options"]["dtype"]
