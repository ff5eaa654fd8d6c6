"""One road through the engine: schemas translate, the report draws the engine's own trace.

Every caller runs the engine once (``service.analysis.analyze_request``) and draws or
dumps from its result; nothing recomputes a stage the engine ran (house style, "One road").
"""

from __future__ import annotations

import ast
import importlib
import inspect
import json
import pkgutil
import xml.etree.ElementTree as ElementTree
from pathlib import Path

import matplotlib
import numpy as np
import pytest

import features
from schemas.engine_inputs import engine_inputs
from schemas.requests import AnalysisRequestSchema
from service.cli import main
from service.demo import demo_request_body

ROOT = Path(__file__).resolve().parents[2]
#: Engine functions that look a name up in a fixed table and compute nothing from a trace
#: or a result: the request schema reads the unit choices and the default coupling rule of
#: a channel's metadata (``resolve_coupling``: quantity, unit and scale -> ``dc``/``ac``),
#: and formats the limits' choice lists into its messages; the catalogue reads its entries.
LOOKUPS = frozenset({
    "features.feature_vector.catalogue_fingerprint",
    "features.feature_vector.catalogue_markdown",
    "features.feature_vector.feature_definition",
    "features.limits.resolve_coupling",
    "features.limits.mains_choices",
    "features.limits.units_of",
    "features.limits.units_text",
})
#: The files that must only translate or draw.
SCANNED = sorted((ROOT / "schemas").glob("*.py")) + [
    ROOT / "service" / name for name in ("report.py", "night_report.py", "picture.py")]


def _engine_modules() -> dict[str, object]:
    names = ["features"] + [f"features.{m.name}" for m in pkgutil.iter_modules(features.__path__)]
    return {name: importlib.import_module(name) for name in names}


def _computing(obj: object) -> str | None:
    """The qualified name of ``obj`` when it is an engine function that computes."""
    if not inspect.isfunction(obj) or not obj.__module__.startswith("features"):
        return None
    name = f"{obj.__module__}.{obj.__name__}"
    return None if name in LOOKUPS else name


def engine_calls(source: str) -> list[str]:
    """Engine functions that compute, imported or reached through a module, in ``source``."""
    modules = _engine_modules()
    bound: dict[str, object] = {}  # local name -> engine module
    found: list[str] = []
    tree = ast.parse(source)
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name not in modules:
                    continue
                if alias.asname:  # import features.x as y: y is features.x
                    bound[alias.asname] = modules[alias.name]
                else:  # import features.x: the name bound is features
                    bound["features"] = modules["features"]
        elif isinstance(node, ast.ImportFrom) and node.module in modules:
            for alias in node.names:
                target = getattr(modules[node.module], alias.name, None)
                if f"{node.module}.{alias.name}" in modules:
                    bound[alias.asname or alias.name] = modules[f"{node.module}.{alias.name}"]
                elif (name := _computing(target)) is not None:
                    found.append(name)
    for node in ast.walk(tree):
        if isinstance(node, ast.Attribute):
            chain = [node.attr]
            base = node.value
            while isinstance(base, ast.Attribute):
                chain.append(base.attr)
                base = base.value
            if not isinstance(base, ast.Name) or base.id not in bound:
                continue
            target = bound[base.id]
            for attr in reversed(chain):
                target = getattr(target, attr, None)
            if (name := _computing(target)) is not None:
                found.append(name)
    return found


def test_the_scan_finds_the_second_road_it_guards_against():
    # The two second roads this test pins shut: the report conditioning and fusing again,
    # and the response schema computing the feature vector while it dumps.
    old = (
        "import features\n"
        "from features.feature_vector import feature_vector as engine_feature_vector\n"
        "from features.engine import AnalysisResult\n"
        "def fused(call):\n"
        "    cond = features.condition_channels(call.channels, call.fs_hz)\n"
        "    return features.fuse_channels(cond.signals, call.fs_hz)\n"
    )
    assert sorted(engine_calls(old)) == [
        "features.conditioning.condition_channels",
        "features.feature_vector.feature_vector",
        "features.fusion.fuse_channels",
    ]
    assert engine_calls("import features.windows\nfeatures.windows.analyze_windows\n") == [
        "features.windows.analyze_windows"]


@pytest.mark.parametrize("path", SCANNED, ids=lambda p: str(p.relative_to(ROOT)))
def test_schemas_and_the_report_call_no_engine_function_that_computes(path):
    assert engine_calls(path.read_text(encoding="utf-8")) == []


@pytest.fixture(scope="module")
def body():
    return demo_request_body()


def test_the_report_draws_the_engines_fused_trace(monkeypatch, client, body):
    import service.report as report

    drawn = []
    real = report._trace_panel

    def recording(ax, result, trace):
        drawn.append(trace)
        return real(ax, result, trace)

    monkeypatch.setattr(report, "_trace_panel", recording)
    response = client.post("/v1/reports", json=body, headers={"Accept": "image/png"})
    assert response.status_code == 200
    (trace,) = drawn
    call = engine_inputs(AnalysisRequestSchema().load(body))
    engine = features.analyze(call.channels, call.fs_hz, subject=call.subject,
                              recording=call.recording,
                              options=features.Options(keep_fused_trace=True))
    assert trace.shape == (engine.input.n_samples,)
    # The engine's fusion sums with BLAS daxpy, whose rounding may depend on memory
    # alignment by a few ulps (tests/features/test_fusion.py); hence not bit-equality.
    np.testing.assert_allclose(trace, engine.fused_trace, rtol=1e-12, atol=1e-12)


def test_analyze_plot_keeps_the_windows_and_the_picture_counts_them(tmp_path, body, capsys):
    path = tmp_path / "evening.npz"
    np.savez(path, sampling_rate_hz=np.float64(body["sampling_rate_hz"]),
             **{c["label"]: np.asarray(c["samples"]) for c in body["channels"]})
    image = tmp_path / "report.svg"
    # Text as <text> elements rather than glyph paths, so the legend can be read back.
    with matplotlib.rc_context({"svg.fonttype": "none"}):
        assert main(["analyze", str(path), "--window-s", "50",
                     "--overlap-s", "10", "--plot", str(image)]) == 0
    document = json.loads(capsys.readouterr().out)
    # The demo trace is 120 s (service.demo); 50-s windows every 40 s start at 0 and 40 s
    # (the grid of features.windows.analyze_windows, Notes 1), leaving a 30-s tail.
    windows = document["windows"]
    assert [w["start_s"] for w in windows["windows"]] == [0.0, 40.0]
    assert windows["unanalysed_tail_s"] == pytest.approx(30.0, abs=1 / 250)
    texts = "".join(ElementTree.fromstring(image.read_bytes()).itertext())
    assert "2 windows of 50 s" in texts
