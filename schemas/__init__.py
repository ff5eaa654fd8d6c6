"""Marshmallow schemas: JSON and CSV into typed analysis requests, engine results into JSON.

The only package that imports marshmallow.

requests
    AnalysisRequestSchema (body of POST /v1/analyses) -> AnalysisRequest
csv_input
    read_csv_channels, csv_request_body, CsvUploadFormSchema (multipart form fields)
engine_inputs
    engine_inputs(AnalysisRequest) -> EngineCall (arguments of features.analyze)
responses
    AnalysisResponseSchema (dumps an AnalysisReport), NOTICE
catalogue
    FEATURES, CatalogueSchema (GET /v1/features)
problems
    RFC 9457 problem-details schemas, for the contract
errors
    SchemaValidationError, flatten_errors, pointer_of
fields
    SamplesField, StrictFloat, decode_base64_samples, BASE64_DTYPES
"""
