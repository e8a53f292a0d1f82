//! Read throughput of the three-point CSV reader on a large synthetic table.
//!
//! The table (about 2.9 million rows, 4 tsep values, 60 channels each, 1000 configurations)
//! is written once to a temporary file with the crate's own writer; each iteration streams it
//! through `io::read_threept`. Throughput is reported in bytes; rows per second follow from
//! the row count printed at the start.

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use formfactory::data::{Current, Projector, Series, ThreePointData, ThreePointKey};
use formfactory::io;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::io::BufWriter;

const N_CFG: i64 = 1000;

fn synthetic() -> ThreePointData {
    let mut rng = ChaCha8Rng::seed_from_u64(2026);
    let mut data = ThreePointData {
        configs: (0..N_CFG).map(|i| 1000 + 4 * i).collect(),
        ..Default::default()
    };
    let qs = [
        [0, 0, 0],
        [1, 0, 0],
        [0, 1, 0],
        [0, 0, 1],
        [1, 1, 0],
        [1, 0, 1],
    ];
    for tsep in [8u32, 10, 12, 14] {
        for current in [
            Current::V1,
            Current::V2,
            Current::V3,
            Current::V4,
            Current::A3,
        ] {
            for projector in [Projector::Unpol, Projector::Pol(3)] {
                for q in qs {
                    let n_t = tsep as usize + 1;
                    let mut s = Series::zeros(n_t, N_CFG as usize);
                    for i in 0..s.re.len() {
                        s.re[i] = 1e-9 * rng.gen::<f64>();
                        s.im[i] = 1e-11 * (rng.gen::<f64>() - 0.5);
                    }
                    let key = ThreePointKey {
                        tsep,
                        pf: [0, 0, 0],
                        q,
                        current,
                        projector,
                        flavor: None,
                        diagram: None,
                        ops: None,
                    };
                    data.channels.insert(key, s);
                }
            }
        }
    }
    data
}

fn read(c: &mut Criterion) {
    let data = synthetic();
    let rows: usize = data.channels.values().map(|s| s.re.len()).sum();
    let file = tempfile::NamedTempFile::new().expect("a temporary file");
    io::write_threept(&data, BufWriter::new(file.as_file())).expect("the table is written");
    drop(data);
    let bytes = std::fs::metadata(file.path()).expect("metadata").len();
    eprintln!("three-point table: {rows} rows, {bytes} bytes");
    let mut group = c.benchmark_group("read");
    group.sample_size(10);
    group.throughput(Throughput::Bytes(bytes));
    group.bench_function("threept", |b| {
        b.iter(|| {
            let d = io::read_threept(file.path()).expect("the table reads back");
            assert_eq!(d.configs.len(), N_CFG as usize);
            d
        })
    });
    group.finish();
}

criterion_group!(benches, read);
criterion_main!(benches);
