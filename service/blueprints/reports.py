"""Reports: the same body as an analysis in, its report image (PNG or SVG) out."""

from __future__ import annotations

from flask import Blueprint, Response, current_app, request

from service.bodies import read_analysis_request
from service.deadline import run_with_deadline
from service.problems import problem
from service.report import MEDIA_TYPES, report_of

blueprint = Blueprint("reports", __name__)

_FORMAT_OF = {media_type: name for name, media_type in MEDIA_TYPES.items()}


def negotiate_image() -> tuple[str, str] | Response:
    """(media type, image format) the request's ``Accept`` asks for, PNG when it names
    none; a 406 problem when it names neither image type. The report and the night
    picture answer alike."""
    media_type: str | None = "image/png"
    if request.headers.get("Accept"):
        media_type = request.accept_mimetypes.best_match(list(_FORMAT_OF))
    if media_type is None:
        return problem(
            406, "The report is served as " + " or ".join(sorted(_FORMAT_OF)) + "; got "
            f"Accept {request.headers.get('Accept', '')[:80]!r}."
        )
    return media_type, _FORMAT_OF[media_type]


@blueprint.post("/reports")
def create_report() -> Response:
    """Analyse a trace (JSON or upload) and answer the report image the ``Accept`` asks for."""
    negotiated = negotiate_image()
    if isinstance(negotiated, Response):
        return negotiated
    media_type, image_format = negotiated

    def work() -> bytes:
        return report_of(read_analysis_request(), image_format=image_format)

    image = run_with_deadline(current_app.config["HEARTSWAY_MAX_COMPUTE_S"], work)
    response = Response(image, mimetype=media_type)
    response.vary.add("Accept")
    return response
