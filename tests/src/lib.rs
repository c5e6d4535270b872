//! Shared helpers of the integration tests (being written).
