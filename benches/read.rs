//! Benchmark placeholder; replaced by the read work.
fn main() {}
