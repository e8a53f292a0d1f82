//! Benchmark placeholder; replaced by the spectrum work.
fn main() {}
