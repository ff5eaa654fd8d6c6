"""Liveness and readiness."""

from __future__ import annotations

import warnings

import numpy as np
from flask import Blueprint, Response, current_app, jsonify

import features
from features.conditioning import ChannelInput
from features.errors import EngineError
from service.logs import current_request_id, logger
from service.problems import problem

blueprint = Blueprint("health", __name__)

#: The self-check trace: 30 s at 250 Hz of a 72 kg load with a 1.1 Hz ripple.
_SELF_CHECK_FS_HZ = 250.0
_SELF_CHECK_S = 30.0


def engine_self_check() -> str | None:
    """Run the engine once on a small synthetic trace; None when it works.

    A verdict on the trace (an engine error) still proves a working engine;
    any other exception means the numerical stack is broken in this process.
    """
    t = np.arange(int(_SELF_CHECK_S * _SELF_CHECK_FS_HZ)) / _SELF_CHECK_FS_HZ
    trace = 706.0 + 0.5 * np.sin(2 * np.pi * 1.1 * t)
    channel = ChannelInput(samples=trace, label="self_check", quantity="force", unit="N")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            features.analyze([channel], _SELF_CHECK_FS_HZ)
    except EngineError:
        pass
    except Exception as error:  # noqa: BLE001 - any failure means "not ready"
        return type(error).__name__
    return None


@blueprint.get("/healthz")
def healthz() -> Response:
    """Liveness: the process answers HTTP."""
    return jsonify(status="ok", version=features.__version__)


@blueprint.get("/readyz")
def readyz() -> Response:
    """Readiness: the engine has analysed a synthetic trace in this process."""
    state = current_app.extensions.setdefault("heartsway", {})
    if not state.get("ready"):
        failure = engine_self_check()
        if failure is not None:
            logger.error(
                "engine_self_check_failed",
                extra={"fields": {"request_id": current_request_id(), "exception": failure}},
            )
            return problem(
                503, "The analysis engine failed its self-check; see the service log."
            )
        state["ready"] = True
    return jsonify(status="ready", version=features.__version__)
