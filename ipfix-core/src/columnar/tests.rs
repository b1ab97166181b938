//! Unit tests of the columnar module.
