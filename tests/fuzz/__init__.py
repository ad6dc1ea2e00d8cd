"""Property-based fuzzing of the whole /v1 API from its own OpenAPI document."""
