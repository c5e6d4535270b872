//! envord's cross-crate integration tests: what spans dsp-core, host-sim and
//! the frame formats (the tests are in `tests/`). Tests of dsp-core alone
//! live in `dsp-core/tests/`.
