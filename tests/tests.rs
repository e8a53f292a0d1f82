//! The one integration-test binary; each module covers one area.
