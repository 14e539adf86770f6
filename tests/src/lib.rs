//! Shared helpers for the cross-crate tests live in `tests/tests/`; this crate has no library code.
