"""The project's own identifiers: tag URIs (RFC 4151) for problem types and code systems.

The project publishes no web site whose URLs it could promise to keep, so the
identifiers it mints are ``tag:`` URIs (Kindberg T, Hawke S. The 'tag' URI Scheme.
RFC 4151, 2005. doi:10.17487/RFC4151): ``tag:<authority>,<date>:<specific>``, unique
without any registry and never dereferenced. docs/identifiers.md lists them.
"""

from __future__ import annotations

#: The tagging entity (RFC 4151 section 2.1): the project's name as a domain, with the
#: year the identifiers were minted. Change it here only; every URI below follows.
TAG_AUTHORITY = "heartsway.dev,2026"


def project_uri(specific: str) -> str:
    """``tag:heartsway.dev,2026:<specific>``, a URI of the project's own."""
    return f"tag:{TAG_AUTHORITY}:{specific}"


#: Problem types (RFC 9457 section 3.1.1) of the service's own domain.
PROBLEM_TYPE_PREFIX = project_uri("problem/")

#: The FHIR code system of the project's features (docs/fhir.md).
FEATURE_CODE_SYSTEM = project_uri("fhir/CodeSystem/features")
