"""Analysis results as an HL7 FHIR R4 Bundle (type ``collection``) of Observation resources.

One Observation per feature of the feature vector (``features.FEATURES``), in
catalogue order. Plain dictionaries in the FHIR JSON form: no FHIR library is
needed at run time (the tests validate the output with two of them).

Codes
-----
Each Observation's ``code`` carries our own concept (the feature's name in the
code system :data:`FEATURE_SYSTEM`, documented in ``docs/fhir.md``) and, where a
standard concept means the same thing, the LOINC code first:

===========================  ========  ==================================================
feature                      LOINC     source of the code
===========================  ========  ==================================================
``heart_rate_mean_bpm``      8867-4    LOINC "Heart rate"; FHIR R4 vital-signs profile
                                       (hl7.org/fhir/R4/observation-vitalsigns.html)
``breathing_rate_per_min``   9279-1    LOINC "Respiratory rate"; the same R4 profile
===========================  ========  ==================================================

No LOINC code is claimed for the other measures. LOINC 80404-7 ("R-R
interval.standard deviation (Heart rate variability)", loinc.org/80404-7) is the SDNN
of electrocardiographic R-R intervals; our ``sdnn_ms`` is the SDNN of J-J intervals
of the ballistocardiogram, so it carries only our own concept, and every
Observation's ``method`` says that its intervals are J-J intervals. For RMSSD,
pNN50, spectral powers, Poincare SD1/SD2, the ballistocardiogram waves and the
breathing measures we found no code that means the same thing either.

Units are UCUM (``http://unitsofmeasure.org``): ``/min``, ``ms``, ``ms2``, ``%``,
``/h``, ``1`` for dimensionless values, ``N``, ``m/s2``; the input-dependent
"a.u." (arbitrary units of a mixed-unit fusion) has no UCUM code and is sent as
unit text only.
"""

from __future__ import annotations

import uuid
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any

from schemas.identifiers import FEATURE_CODE_SYSTEM

#: Our code system (a tag: URI, RFC 4151): one concept per feature, plus ``confidence``.
FEATURE_SYSTEM = FEATURE_CODE_SYSTEM
#: LOINC (Regenstrief Institute), the system URI FHIR R4 names for it.
LOINC_SYSTEM = "http://loinc.org"
#: UCUM, the system URI FHIR R4 names for it.
UCUM_SYSTEM = "http://unitsofmeasure.org"
#: FHIR R4 terminology: observation categories and data-absent reasons.
CATEGORY_SYSTEM = "http://terminology.hl7.org/CodeSystem/observation-category"
ABSENT_SYSTEM = "http://terminology.hl7.org/CodeSystem/data-absent-reason"
#: Media type of FHIR JSON (FHIR R4, http.html#mime-type).
FHIR_JSON = "application/fhir+json"
#: Namespace of the Observation ids (uuid5 of analysis id and feature name).
_NAMESPACE = uuid.UUID("6f1d3c1e-8a0e-5b8f-9d3e-5f7c2a1b4e90")

#: Feature name -> (LOINC code, LOINC display). Sources in the module docstring.
LOINC_CODES: dict[str, tuple[str, str]] = {
    # LOINC 8867-4 "Heart rate" (FHIR R4 vital signs profile, heart rate).
    "heart_rate_mean_bpm": ("8867-4", "Heart rate"),
    # LOINC 9279-1 "Respiratory rate" (FHIR R4 vital signs profile, respiratory rate).
    "breathing_rate_per_min": ("9279-1", "Respiratory rate"),
}
#: What every Observation's ``method.text`` says of the intervals behind it.
INTERVALS_METHOD = ("beat-to-beat intervals are J-J intervals of the ballistocardiogram, "
                    "not R-R intervals of an electrocardiogram")
#: Features that are vital signs (FHIR R4 observation-category ``vital-signs``).
VITAL_SIGNS = frozenset({"heart_rate_mean_bpm", "breathing_rate_per_min"})

#: Catalogue units -> UCUM codes (None: no UCUM code, unit text only).
_UCUM = {"/min": "/min", "ms": "ms", "ms2": "ms2", "%": "%", "/h": "/h", "s": "s",
         "N": "N", "m/s^2": "m/s2", "m/s2": "m/s2", "N/kg": "N/kg", "m/s^2/kg": "m/s2/kg",
         "m/s2/kg": "m/s2/kg", "a.u.": None, "a.u./kg": None}


def ucum_quantity(value: float, unit: str | None) -> dict[str, Any]:
    """A FHIR Quantity for ``value`` in a catalogue unit (None: dimensionless, UCUM ``1``)."""
    if unit is None:
        return {"value": value, "unit": "1", "system": UCUM_SYSTEM, "code": "1"}
    quantity: dict[str, Any] = {"value": value, "unit": unit}
    code = _UCUM.get(unit)
    if code is not None:
        quantity.update(system=UCUM_SYSTEM, code=code)
    return quantity


def _display(name: str) -> str:
    return name.replace("_", " ")


def _observation(feature: Mapping[str, Any], *, analysis_id: str, effective: str | None,
                 notice: str, method: str) -> dict[str, Any]:
    name = feature["name"]
    codings = []
    if name in LOINC_CODES:
        code, display = LOINC_CODES[name]
        codings.append({"system": LOINC_SYSTEM, "code": code, "display": display})
    codings.append({"system": FEATURE_SYSTEM, "code": name, "display": _display(name)})
    observation: dict[str, Any] = {
        "resourceType": "Observation",
        "id": str(uuid.uuid5(_NAMESPACE, f"{analysis_id}/{name}")),
        "status": "final",
    }
    if name in VITAL_SIGNS:
        observation["category"] = [{"coding": [
            {"system": CATEGORY_SYSTEM, "code": "vital-signs", "display": "Vital Signs"}
        ]}]
    observation["code"] = {"coding": codings, "text": _display(name)}
    if effective is not None:
        observation["effectiveDateTime"] = effective
    if feature["value"] is None:
        observation["dataAbsentReason"] = {
            "coding": [{"system": ABSENT_SYSTEM, "code": "unknown", "display": "Unknown"}],
            "text": str(feature.get("reason") or "not_computed"),
        }
    else:
        observation["valueQuantity"] = ucum_quantity(float(feature["value"]), feature["unit"])
    observation["note"] = [{"text": notice}]
    observation["method"] = {"text": method}
    observation["component"] = [{
        "code": {"coding": [{"system": FEATURE_SYSTEM, "code": "confidence",
                             "display": "confidence of the value"}]},
        "valueQuantity": ucum_quantity(float(feature["confidence"]), None),
    }]
    return observation


def fhir_bundle(document: Mapping[str, Any], *, effective: str | None = None,
                timestamp: datetime | None = None) -> dict[str, Any]:
    """The FHIR R4 Bundle (type ``collection``) of one analysis document.

    Parameters
    ----------
    document
        An analysis as :class:`schemas.responses.AnalysisResponseSchema` dumps it.
    effective
        Start of the recording (ISO 8601 with a UTC offset) for ``effectiveDateTime``;
        omitted when None.
    timestamp
        When the bundle was assembled (now by default).

    Returns
    -------
    dict
        ``resourceType`` Bundle, ``type`` collection, one entry per feature with a
        ``urn:uuid`` full URL and its Observation: ``code`` (LOINC where it exists,
        always our concept), ``valueQuantity`` in UCUM or a ``dataAbsentReason``
        with the reason as text, the confidence as a component (UCUM ``1``), the
        caution as a note, and as the method the engine and feature-set versions and
        that the intervals are J-J (ballistocardiogram), not R-R (ECG).
    """
    analysis_id = str(document["analysis_id"])
    vector = document["feature_vector"]
    method = (f"heartsway engine {document['engine_version']}, feature set "
              f"{vector['feature_set_version']}, from a body-recoil (ballistocardiogram) trace; "
              f"{INTERVALS_METHOD}")
    entries = []
    for feature in vector["features"]:
        resource = _observation(feature, analysis_id=analysis_id, effective=effective,
                                notice=str(document["notice"]), method=method)
        entries.append({"fullUrl": f"urn:uuid:{resource['id']}", "resource": resource})
    moment = (timestamp or datetime.now(UTC)).astimezone(UTC)
    return {
        "resourceType": "Bundle",
        "id": analysis_id,
        "type": "collection",
        "timestamp": moment.isoformat(timespec="milliseconds").replace("+00:00", "Z"),
        "entry": entries,
    }
