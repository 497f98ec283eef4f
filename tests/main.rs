//! Integration tests: one binary, shared harness in `support/`.
