//! The end-to-end harness (testkit::e2e) bound to this package's `loopbal` binary.

testkit::e2e_support!();
