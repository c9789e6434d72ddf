"""vocobench: quality-against-latency benchmarking for waveform diffusion vocoders.

The Python API mirrors the CLI::

    import vocobench as vb
    cfg = vb.load_config("sweep.toml")
    run_dir = vb.run(cfg)                     # vocobench run sweep.toml
    findings = vb.check_target("pkg.mod:obj")  # vocobench check pkg.mod:obj
    vb.render_report(run_dir)                 # vocobench report RUN_DIR
"""
from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

_EXPORTS = {
    "InputError": "errors", "ItemFailure": "errors", "MetricUnavailable": "errors",
    "MelFrontEnd": "frontend", "NoiseSchedule": "schedules", "Plugin": "contracts",
    "load_plugin": "contracts", "Vocoder": "contracts", "Denoiser": "contracts",
    "load_config": "config", "parse_config": "config", "RunConfig": "config",
    "run": "sweep", "prepare": "sweep", "check_target": "check", "check_object": "check",
    "load_testset": "testset", "load_run": "store", "AnalyticDenoiser": "analytic",
    "render_report": "report",
}
__all__ = ["__version__", *_EXPORTS]


def __getattr__(name: str) -> Any:       # lazy: `import vocobench` stays cheap
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module 'vocobench' has no attribute {name!r}")
