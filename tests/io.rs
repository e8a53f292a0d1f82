//! Integration tests: io (reader rules of data-format.md, writers, round trip, inspect).

use formfactory::data::{
    Current, Diagram, Projector, Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey,
};
use formfactory::io;
use std::collections::BTreeMap;

fn small_twopt() -> TwoPointData {
    let mut channels = BTreeMap::new();
    let mut s = Series::zeros(2, 2);
    s.re = vec![1.5, 1.25, 0.5, 2.5e-7];
    s.im = vec![0.0, -0.0, 1e-20, 3.0];
    channels.insert(
        TwoPointKey {
            momentum: [0, 0, 1],
            smear: None,
            ops: None,
        },
        s,
    );
    TwoPointData {
        configs: vec![4, 10],
        channels,
    }
}

fn small_threept() -> ThreePointData {
    let mut channels = BTreeMap::new();
    let mut s = Series::zeros(2, 1);
    s.re = vec![0.25, -0.75];
    s.im = vec![1.0, 2.0];
    channels.insert(
        ThreePointKey {
            tsep: 1,
            pf: [0, 0, 0],
            q: [1, 0, 0],
            current: Current::V4,
            projector: Projector::Unpol,
            flavor: Some("u".into()),
            diagram: Some(Diagram::Connected),
            ops: None,
        },
        s,
    );
    ThreePointData {
        configs: vec![7],
        channels,
    }
}

#[test]
fn writers_are_deterministic_and_in_documented_order() {
    let mut a = Vec::new();
    io::write_twopt(&small_twopt(), &mut a).unwrap();
    let mut b = Vec::new();
    io::write_twopt(&small_twopt(), &mut b).unwrap();
    assert_eq!(a, b);
    assert_eq!(
        String::from_utf8(a).unwrap(),
        "config,px,py,pz,t,re,im\n\
         4,0,0,1,0,1.5,0\n\
         10,0,0,1,0,1.25,-0\n\
         4,0,0,1,1,0.5,1e-20\n\
         10,0,0,1,1,2.5e-7,3\n"
    );
    let mut c = Vec::new();
    io::write_threept(&small_threept(), &mut c).unwrap();
    assert_eq!(
        String::from_utf8(c).unwrap(),
        "config,tsep,tau,pfx,pfy,pfz,qx,qy,qz,current,projector,re,im,flavor,diagram\n\
         7,1,0,0,0,0,1,0,0,V4,unpol,0.25,1,u,connected\n\
         7,1,1,0,0,0,1,0,0,V4,unpol,-0.75,2,u,connected\n"
    );
}

#[test]
fn writer_refuses_non_finite_and_misshapen_series() {
    let mut d = small_twopt();
    d.channels.values_mut().next().unwrap().re[1] = f64::NAN;
    assert!(matches!(
        io::write_twopt(&d, Vec::new()),
        Err(formfactory::Error::Table { .. })
    ));
    let mut d = small_threept();
    d.channels.values_mut().next().unwrap().n_t = 3;
    assert!(matches!(
        io::write_threept(&d, Vec::new()),
        Err(formfactory::Error::Table { .. })
    ));
}

// ---------------------------------------------------------------------------------------
// Reader rules of data-format.md, one test each, on hand-written fixtures.

use crate::common::fixture;
use approx::assert_relative_eq;
use formfactory::error::Location;
use formfactory::Error;
use std::path::Path;

fn f(name: &str) -> std::path::PathBuf {
    fixture(&format!("io/{name}"))
}

/// The location and message of a `Data` error; fails the test on anything else.
fn data_error(r: Result<impl std::fmt::Debug, Error>) -> (Location, String) {
    match r {
        Err(Error::Data { location, message }) => (location, message),
        other => panic!("expected Error::Data, got {other:?}"),
    }
}

/// The path and message of a `Table` error; fails the test on anything else.
fn table_error(r: Result<impl std::fmt::Debug, Error>) -> (std::path::PathBuf, String) {
    match r {
        Err(Error::Table { path, message }) => (path, message),
        other => panic!("expected Error::Table, got {other:?}"),
    }
}

fn assert_at(loc: &Location, file: &str, line: u64, column: Option<u64>, field: &str) {
    assert!(loc.file.ends_with(file), "{loc}");
    assert_eq!(loc.line, line, "{loc}");
    assert_eq!(loc.column, column, "{loc}");
    assert_eq!(loc.field.as_deref(), Some(field), "{loc}");
}

#[test]
fn reads_columns_in_any_order_into_the_data_model() {
    // twopt_ok.csv: columns t,re,config,im,pz,px,py; rows config-major in the order 3, 1, 2;
    // re = 10 * config + t + pz / 2, im = -config / 4 by construction of the fixture.
    let d = io::read_twopt(&f("twopt_ok.csv")).unwrap();
    assert_eq!(d.configs, vec![1, 2, 3]);
    assert_eq!(d.channels.len(), 2);
    for (key, s) in &d.channels {
        assert_eq!(key.smear, None);
        assert_eq!((s.n_t, s.n_cfg), (3, 3));
        for t in 0..3 {
            for (c, &config) in d.configs.iter().enumerate() {
                let want = 10.0 * config as f64 + t as f64 + 0.5 * f64::from(key.momentum[2]);
                assert_relative_eq!(s.re[s.index(t, c)], want);
                assert_relative_eq!(s.im[s.index(t, c)], -(config as f64) / 4.0);
            }
            // configurations contiguous per time slice
            assert_relative_eq!(
                s.re_at(t)[2],
                30.0 + t as f64 + 0.5 * f64::from(key.momentum[2])
            );
        }
    }
    let d = io::read_threept(&f("threept_ok.csv")).unwrap();
    assert_eq!(d.configs, vec![1, 2, 3]);
    let (key, s) = d.channels.iter().next().unwrap();
    assert_eq!(key.tsep, 2);
    assert_eq!(key.q, [0, 0, 1]);
    assert_eq!(key.source_momentum(), [0, 0, -1]);
    assert_eq!(key.current, Current::V4);
    assert_eq!(key.projector, Projector::Unpol);
    assert_eq!(key.flavor.as_deref(), Some("u-d"));
    assert_eq!(key.diagram, None);
    assert_eq!(s.n_t, 3);
    assert_relative_eq!(s.re[s.index(2, 1)], 2.5);
}

#[test]
fn missing_required_column_is_named() {
    let (loc, msg) = data_error(io::read_twopt(&f("twopt_missing_column.csv")));
    assert!(loc.file.ends_with("twopt_missing_column.csv"));
    assert_eq!(loc.line, 1);
    assert_eq!(loc.field.as_deref(), Some("im"));
    assert!(msg.contains("required column `im` is missing"), "{msg}");
}

#[test]
fn unknown_column_is_an_error_at_its_header_position() {
    let (loc, msg) = data_error(io::read_twopt(&f("twopt_unknown_column.csv")));
    assert_at(&loc, "twopt_unknown_column.csv", 1, Some(8), "weight");
    assert!(msg.contains("unknown column `weight`"), "{msg}");
}

#[test]
fn unparsable_number_names_file_line_and_column() {
    let r = io::read_twopt(&f("twopt_bad_number.csv"));
    let shown = r.as_ref().map(|_| ()).unwrap_err().to_string();
    assert!(
        shown.contains("twopt_bad_number.csv:4:2 (column `re`)"),
        "{shown}"
    );
    let (loc, msg) = data_error(r);
    assert_at(&loc, "twopt_bad_number.csv", 4, Some(2), "re");
    assert!(msg.contains("`3x.0`") && msg.contains("a number"), "{msg}");
}

#[test]
fn non_finite_numbers_are_errors() {
    let (loc, msg) = data_error(io::read_twopt(&f("twopt_nan.csv")));
    assert_at(&loc, "twopt_nan.csv", 5, Some(4), "im");
    assert!(msg.contains("non-finite value `NaN`"), "{msg}");
    let (loc, msg) = data_error(io::read_twopt(&f("twopt_inf.csv")));
    assert_at(&loc, "twopt_inf.csv", 6, Some(2), "re");
    assert!(msg.contains("non-finite value `inf`"), "{msg}");
}

#[test]
fn negative_time_is_an_error() {
    let (loc, msg) = data_error(io::read_twopt(&f("twopt_negative_t.csv")));
    assert_at(&loc, "twopt_negative_t.csv", 3, Some(1), "t");
    assert!(msg.contains("-1") && msg.contains("0 <= t"), "{msg}");
}

#[test]
fn tau_outside_zero_to_tsep_is_an_error() {
    let (loc, msg) = data_error(io::read_threept(&f("threept_tau_outside.csv")));
    assert_at(&loc, "threept_tau_outside.csv", 5, Some(3), "tau");
    assert!(
        msg.contains("tau = 3 lies outside [0, tsep] = [0, 2]"),
        "{msg}"
    );
}

#[test]
fn unknown_current_and_projector_are_errors() {
    let (loc, msg) = data_error(io::read_threept(&f("threept_unknown_current.csv")));
    assert_at(&loc, "threept_unknown_current.csv", 3, Some(10), "current");
    assert!(
        msg.contains("unknown current `V5`") && msg.contains("T34"),
        "{msg}"
    );
    let (loc, msg) = data_error(io::read_threept(&f("threept_unknown_projector.csv")));
    assert_at(
        &loc,
        "threept_unknown_projector.csv",
        4,
        Some(11),
        "projector",
    );
    assert!(msg.contains("unknown projector `pol4`"), "{msg}");
}

#[test]
fn duplicate_row_names_key_and_line() {
    let (loc, msg) = data_error(io::read_twopt(&f("twopt_duplicate.csv")));
    assert!(loc.file.ends_with("twopt_duplicate.csv"));
    assert_eq!(loc.line, 20);
    assert!(msg.contains("duplicate row"), "{msg}");
    assert!(
        msg.contains("p=(0,0,0) t=1") && msg.contains("configuration 3"),
        "{msg}"
    );
}

#[test]
fn same_source_twice_is_a_duplicate() {
    let (loc, msg) = data_error(io::read_twopt(&f("twopt_dup_source.csv")));
    assert_eq!(loc.line, 12);
    assert!(msg.contains("configuration 5 and source 1"), "{msg}");
}

#[test]
fn missing_row_names_the_first_offending_key_and_line() {
    let (path, msg) = table_error(io::read_twopt(&f("twopt_missing_config.csv")));
    assert!(path.ends_with("twopt_missing_config.csv"));
    assert!(
        msg.contains("missing row: two-point p=(0,0,1) t=2"),
        "{msg}"
    );
    assert!(
        msg.contains("configuration 3") && msg.contains("line 5"),
        "{msg}"
    );
}

#[test]
fn empty_file_and_header_only_are_clear_errors() {
    let (path, msg) = table_error(io::read_twopt(&f("empty.csv")));
    assert!(path.ends_with("empty.csv"));
    assert!(msg.contains("the file is empty"), "{msg}");
    let (_, msg) = table_error(io::read_threept(&f("empty.csv")));
    assert!(msg.contains("expected a header line"), "{msg}");
    let (path, msg) = table_error(io::read_twopt(&f("header_only.csv")));
    assert!(path.ends_with("header_only.csv"));
    assert!(msg.contains("no data rows"), "{msg}");
}

#[test]
fn sources_are_averaged_per_configuration() {
    // twopt_sources.csv: config 5 has sources 0, 1; config 6 has sources 0, 3, 7 (rows in
    // mixed order). Averages worked out by hand from the fixture.
    let d = io::read_twopt(&f("twopt_sources.csv")).unwrap();
    assert_eq!(d.configs, vec![5, 6]);
    let s = d.channels.values().next().unwrap();
    let want_re = [2.0, 2.0, 3.0, 3.0]; // (t=0: cfg5, cfg6), (t=1: cfg5, cfg6)
    let want_im = [0.0, -1.0, 0.5, 1.0];
    for i in 0..4 {
        assert_relative_eq!(s.re[i], want_re[i], epsilon = 1e-15);
        assert_relative_eq!(s.im[i], want_im[i], epsilon = 1e-15);
    }
    let ds = io::read_dataset(&f("twopt_sources.csv"), None, &io::ReadOptions::default()).unwrap();
    assert!(
        ds.notes
            .iter()
            .any(|n| n.contains("averaged between 2 and 3 sources")),
        "{:?}",
        ds.notes
    );
}

#[test]
fn tables_with_different_configurations_are_refused_or_trimmed() {
    let two = f("twopt_ok.csv");
    let three = f("threept_fewer_configs.csv");
    let (path, msg) = table_error(io::read_dataset(
        &two,
        Some(&three),
        &io::ReadOptions::default(),
    ));
    assert!(path.ends_with("threept_fewer_configs.csv"));
    assert!(msg.contains("different configurations"), "{msg}");
    assert!(
        msg.contains("(first: 3)") && msg.contains("(first: 4)"),
        "{msg}"
    );

    let opts = io::ReadOptions {
        keep_common_configs: true,
    };
    let ds = io::read_dataset(&two, Some(&three), &opts).unwrap();
    assert_eq!(ds.dropped_configs, vec![3, 4]);
    assert_eq!(ds.twopt.configs, vec![1, 2]);
    let three = ds.threept.unwrap();
    assert_eq!(three.configs, vec![1, 2]);
    // the kept columns carry their own values: re = 10 * config + t + pz / 2
    let s = &ds.twopt.channels.values().next().unwrap();
    assert_eq!(s.n_cfg, 2);
    assert_relative_eq!(s.re[s.index(2, 1)], 22.0);
    assert!(
        ds.notes.iter().any(|n| n.contains("dropped 2: [3, 4]")),
        "{:?}",
        ds.notes
    );
}

#[test]
fn same_configurations_give_no_drops() {
    let ds = io::read_dataset(
        &f("twopt_ok.csv"),
        Some(&f("threept_ok.csv")),
        &io::ReadOptions::default(),
    )
    .unwrap();
    assert!(ds.dropped_configs.is_empty());
    assert_eq!(ds.threept.unwrap().configs, vec![1, 2, 3]);
}

// ---------------------------------------------------------------------------------------
// Round trip and robustness.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Seeded random data over many magnitudes, several labels, gapped configuration numbers.
fn random_data(seed: u64) -> (TwoPointData, ThreePointData) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let configs: Vec<i64> = (0..7)
        .map(|i| 100 + 10 * i + i64::from(i == 6) * 40)
        .collect();
    let value = |rng: &mut ChaCha8Rng| {
        let mag = 10f64.powi(rng.gen_range(-30..20));
        let sign = if rng.gen_bool(0.5) { -1.0 } else { 1.0 };
        sign * mag * rng.gen::<f64>()
    };
    let mut two = TwoPointData {
        configs: configs.clone(),
        ..Default::default()
    };
    for (momentum, smear) in [
        ([0, 0, 0], Some("a-a")),
        ([0, 0, 0], Some("a-b")),
        ([1, -1, 0], None),
    ] {
        let mut s = Series::zeros(6, configs.len());
        for i in 0..s.re.len() {
            s.re[i] = value(&mut rng);
            s.im[i] = value(&mut rng);
        }
        two.channels.insert(
            TwoPointKey {
                momentum,
                smear: smear.map(String::from),
                ops: None,
            },
            s,
        );
    }
    let mut three = ThreePointData {
        configs,
        ..Default::default()
    };
    for (tsep, current, projector, flavor, diagram) in [
        (
            4,
            Current::V4,
            Projector::Unpol,
            Some("u"),
            Some(Diagram::Connected),
        ),
        (
            4,
            Current::A3,
            Projector::Pol(3),
            Some("d"),
            Some(Diagram::Disconnected),
        ),
        (6, Current::T12, Projector::Pol(1), None, None),
        (2, Current::S, Projector::None, Some("s"), None),
    ] {
        let mut s = Series::zeros(tsep as usize + 1, three.configs.len());
        for i in 0..s.re.len() {
            s.re[i] = value(&mut rng);
            s.im[i] = value(&mut rng);
        }
        three.channels.insert(
            ThreePointKey {
                tsep,
                pf: [0, 1, 0],
                q: [-1, 1, 2],
                current,
                projector,
                flavor: flavor.map(String::from),
                diagram,
                ops: None,
            },
            s,
        );
    }
    (two, three)
}

fn assert_series_eq(a: &Series, b: &Series) {
    assert_eq!((a.n_t, a.n_cfg), (b.n_t, b.n_cfg));
    for (x, y) in a.re.iter().zip(&b.re).chain(a.im.iter().zip(&b.im)) {
        assert_relative_eq!(*x, *y, max_relative = 1e-15);
    }
}

#[test]
fn write_then_read_gives_the_same_data() {
    for seed in 0..3 {
        let (two, three) = random_data(seed);
        let mut buf = Vec::new();
        io::write_twopt(&two, &mut buf).unwrap();
        let back = io::read_twopt_from(&buf[..], Path::new("twopt.csv")).unwrap();
        assert_eq!(back.configs, two.configs);
        assert_eq!(
            back.channels.keys().collect::<Vec<_>>(),
            two.channels.keys().collect::<Vec<_>>()
        );
        for (k, s) in &two.channels {
            assert_series_eq(&back.channels[k], s);
        }
        // and the second write is byte-identical to the first
        let mut again = Vec::new();
        io::write_twopt(&back, &mut again).unwrap();
        assert_eq!(buf, again);

        let mut buf = Vec::new();
        io::write_threept(&three, &mut buf).unwrap();
        let back = io::read_threept_from(&buf[..], Path::new("threept.csv")).unwrap();
        assert_eq!(back.configs, three.configs);
        assert_eq!(
            back.channels.keys().collect::<Vec<_>>(),
            three.channels.keys().collect::<Vec<_>>()
        );
        for (k, s) in &three.channels {
            assert_series_eq(&back.channels[k], s);
        }
        let mut again = Vec::new();
        io::write_threept(&back, &mut again).unwrap();
        assert_eq!(buf, again);
    }
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]

    /// Arbitrary bytes give Ok or Err, never a panic.
    #[test]
    fn random_bytes_never_panic(bytes in proptest::collection::vec(proptest::prelude::any::<u8>(), 0..400)) {
        let _ = io::read_twopt_from(&bytes[..], Path::new("fuzz.csv"));
        let _ = io::read_threept_from(&bytes[..], Path::new("fuzz.csv"));
    }

    /// Random edits of valid tables give Ok or Err, never a panic.
    #[test]
    fn edited_tables_never_panic(
        edits in proptest::collection::vec((0usize..10_000, proptest::prelude::any::<u8>()), 1..6),
        which in 0usize..2,
    ) {
        let (two, three) = random_data(9);
        let mut buf = Vec::new();
        if which == 0 {
            io::write_twopt(&two, &mut buf).unwrap();
        } else {
            io::write_threept(&three, &mut buf).unwrap();
        }
        let bytes: &[u8] = b"0123456789,-.eE\nxNa";
        for (pos, b) in edits {
            let i = pos % buf.len();
            buf[i] = bytes[usize::from(b) % bytes.len()];
        }
        let _ = io::read_twopt_from(&buf[..], Path::new("edited.csv"));
        let _ = io::read_threept_from(&buf[..], Path::new("edited.csv"));
    }
}

// ---------------------------------------------------------------------------------------
// `formfactory inspect`, through the binary.

use crate::common::{formfactory, stderr, stdout, tempdir};

/// Two tables on configurations 1..=200 without 101..=104. Re C2 follows an AR(1) chain with
/// coefficient `rho` in Monte Carlo time; `negative` puts one negative Re C2 at p=0, t=0.
/// The three-point channel has pf = 0, q = (1,0,0), so its source momentum (-1,0,0) is not
/// in the two-point table.
fn inspect_data(rho: f64, negative: bool) -> (TwoPointData, ThreePointData) {
    let mut rng = ChaCha8Rng::seed_from_u64(42);
    let configs: Vec<i64> = (1..=200).filter(|c| !(101..=104).contains(c)).collect();
    let n = configs.len();
    let mut chain = Vec::with_capacity(n);
    let mut x = 0.0;
    for _ in 0..n {
        // Box-Muller normal deviate
        let (u1, u2): (f64, f64) = (rng.gen::<f64>().max(1e-300), rng.gen());
        let e = (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos();
        x = rho * x + (1.0 - rho * rho).sqrt() * e;
        chain.push(x);
    }
    let mut two = TwoPointData {
        configs: configs.clone(),
        ..Default::default()
    };
    for momentum in [[0, 0, 0], [0, 0, 1]] {
        let mut s = Series::zeros(8, n);
        for t in 0..8 {
            for c in 0..n {
                let i = s.index(t, c);
                s.re[i] = (-0.5 * t as f64).exp() * (1.0 + 0.1 * chain[c]);
                s.im[i] = 1e-3 * chain[(c + 7) % n];
            }
        }
        two.channels.insert(
            TwoPointKey {
                momentum,
                smear: None,
                ops: None,
            },
            s,
        );
    }
    if negative {
        let s = two.channels.values_mut().next().unwrap();
        s.re[5] = -0.5;
    }
    let mut three = ThreePointData {
        configs,
        ..Default::default()
    };
    let mut s = Series::zeros(5, n);
    for i in 0..s.re.len() {
        s.re[i] = 0.3 * (1.0 + 0.1 * chain[i % n]);
    }
    three.channels.insert(
        ThreePointKey {
            tsep: 4,
            pf: [0, 0, 0],
            q: [1, 0, 0],
            current: Current::V4,
            projector: Projector::Unpol,
            flavor: None,
            diagram: None,
            ops: None,
        },
        s,
    );
    (two, three)
}

fn write_dir(dir: &Path, two: &TwoPointData, three: &ThreePointData) {
    io::write_twopt(two, std::fs::File::create(dir.join("twopt.csv")).unwrap()).unwrap();
    io::write_threept(
        three,
        std::fs::File::create(dir.join("threept.csv")).unwrap(),
    )
    .unwrap();
}

#[test]
fn inspect_summarises_a_directory_and_warns() {
    let tmp = tempdir();
    let (two, three) = inspect_data(0.9, true);
    write_dir(tmp.path(), &two, &three);
    let o = formfactory(tmp.path(), &["inspect", "."]);
    let text = stdout(&o);
    assert!(o.status.success(), "{}", stderr(&o));
    for want in [
        "two-point table: ./twopt.csv",
        "three-point table: ./threept.csv",
        "configurations: 196 (1..200, step 1, 1 irregular spacing(s))",
        "channels: 2, T = 8",
        "momenta (2): (0,0,0) (0,0,1)",
        "channels: 1, tsep: 4",
        "currents: V4",
        "projectors: unpol",
        "Re C2 p=(0,0,0) t=1: tau_int =",
        "Re C2 p=(0,0,0) t=4: tau_int =",
        "Re C3 tsep=4 pf=(0,0,0) q=(1,0,0) V4 unpol tau=2: tau_int =",
        // warnings
        "1 configuration(s) have Re C2 <= 0 at t=0",
        "mostly step by 1 but not at 100->105",
        "absent from the two-point table: (-1,0,0) (source)",
        // AR(1) with rho = 0.9 has tau_int = (1 + rho) / (2 (1 - rho)) = 9.5 (methods.md §7)
        "bin the configurations",
    ] {
        assert!(text.contains(want), "missing `{want}` in:\n{text}");
    }
}

#[test]
fn inspect_reads_one_table_or_stdin_and_stays_quiet_on_clean_data() {
    let tmp = tempdir();
    let (two, three) = inspect_data(0.0, false);
    write_dir(tmp.path(), &two, &three);
    let o = formfactory(tmp.path(), &["inspect", "twopt.csv"]);
    let text = stdout(&o);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(text.contains("two-point table: twopt.csv"), "{text}");
    assert!(!text.contains("three-point table"), "{text}");
    assert!(text.contains("tau_int ="), "{text}");
    assert!(!text.contains("bin the configurations"), "{text}");
    assert!(!text.contains("<= 0"), "{text}");

    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_formfactory"))
        .args(["inspect", "-"])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let table = std::fs::read(tmp.path().join("threept.csv")).unwrap();
    {
        use std::io::Write;
        let mut stdin = child.stdin.take().unwrap();
        stdin.write_all(&table).unwrap();
    }
    let o = child.wait_with_output().unwrap();
    let text = stdout(&o);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(text.contains("three-point table: <stdin>"), "{text}");
    assert!(text.contains("rows: 980"), "{text}");
}

#[test]
fn inspect_reports_errors_with_location() {
    let tmp = tempdir();
    let o = formfactory(tmp.path(), &["inspect", "."]);
    assert!(!o.status.success());
    assert!(
        stderr(&o).contains("neither twopt.csv nor threept.csv"),
        "{}",
        stderr(&o)
    );
    let bad = f("threept_unknown_current.csv");
    let o = formfactory(tmp.path(), &["inspect", bad.to_str().unwrap()]);
    assert!(!o.status.success());
    assert!(
        stderr(&o).contains("threept_unknown_current.csv:3:10 (column `current`)"),
        "{}",
        stderr(&o)
    );
}

// ---------------------------------------------------------------------------------------
// Smaller header and row rules, on in-memory tables.

fn twopt_text(text: &str) -> Result<TwoPointData, Error> {
    io::read_twopt_from(text.as_bytes(), Path::new("mem.csv"))
}

#[test]
fn repeated_column_and_ragged_row_are_errors() {
    let (loc, msg) = data_error(twopt_text("config,px,py,pz,t,re,im,re\n1,0,0,0,0,1,0,1\n"));
    assert_at(&loc, "mem.csv", 1, Some(8), "re");
    assert!(msg.contains("appears twice"), "{msg}");
    let (loc, msg) = data_error(twopt_text(
        "config,px,py,pz,t,re,im\n1,0,0,0,0,1,0\n2,0,0,0\n",
    ));
    assert_eq!((loc.line, loc.column), (3, None));
    assert!(msg.contains("row has 4 fields, the header has 7"), "{msg}");
}

#[test]
fn byte_order_mark_and_empty_labels_are_accepted() {
    let d =
        twopt_text("\u{feff}config,px,py,pz,t,re,im,smear\n1,0,0,0,0,2.5,0,\n1,0,0,0,1,1.5,0,\n")
            .unwrap();
    let (key, s) = d.channels.iter().next().unwrap();
    assert_eq!(key.smear, None);
    assert_relative_eq!(s.re[1], 1.5);
}

#[test]
fn absurd_time_values_are_refused_before_allocating() {
    let (loc, msg) = data_error(twopt_text(
        "config,px,py,pz,t,re,im\n1,0,0,0,4000000000,1,0\n",
    ));
    assert_at(&loc, "mem.csv", 2, Some(5), "t");
    assert!(msg.contains("out of range"), "{msg}");
    // a large but allowed tau gap is reported as missing rows, not allocated blindly
    let text = format!(
        "config,tsep,tau,pfx,pfy,pfz,qx,qy,qz,current,projector,re,im\n\
         1,{m},{m},0,0,0,0,0,0,S,none,1,0\n",
        m = io::MAX_TIME
    );
    let (_, msg) = table_error(io::read_threept_from(text.as_bytes(), Path::new("mem.csv")));
    assert!(
        msg.contains("missing row") && msg.contains("tau=0"),
        "{msg}"
    );
}

#[test]
fn unknown_diagram_is_an_error() {
    let text = "config,tsep,tau,pfx,pfy,pfz,qx,qy,qz,current,projector,re,im,diagram\n\
                1,0,0,0,0,0,0,0,0,S,none,1,0,loop\n";
    let (loc, msg) = data_error(io::read_threept_from(text.as_bytes(), Path::new("mem.csv")));
    assert_at(&loc, "mem.csv", 2, Some(14), "diagram");
    assert!(msg.contains("unknown diagram `loop`"), "{msg}");
}

// The reader's memory follows the rows it keeps, not the largest time index it sees: a small
// table whose rows all sit at the largest accepted time (one channel per row) is refused as
// incomplete while allocating a few megabytes at most (it used to build a per-time index for
// every channel, hundreds of megabytes for a file of a few kilobytes).
#[test]
fn rows_at_a_huge_time_do_not_allocate_per_time_slice() {
    let t = io::MAX_TIME;
    let mut csv = String::from("config,px,py,pz,t,re,im\n");
    let mut n = 0;
    'rows: for px in -9..=9 {
        for py in -9..=9 {
            if csv.len() > 4500 {
                break 'rows;
            }
            csv.push_str(&format!("1,{px},{py},0,{t},1.0,0.0\n"));
            n += 1;
        }
    }
    assert!(n > 100, "{n} channels");
    let (result, peak) = crate::common::alloc::peak_bytes(|| {
        io::read_twopt_from(csv.as_bytes(), Path::new("huge-t.csv"))
    });
    let (_, message) = table_error(result);
    assert!(message.contains("missing row"), "{message}");
    assert!(
        peak < 8 << 20,
        "reading {} bytes allocated {peak} bytes at peak",
        csv.len()
    );
}

// Definition (data-format.md: a channel is the tuple of its key columns): rows whose adjacent
// key fields hold the same bytes split differently (`1,12` and `11,2`) are different channels,
// though the reader compares runs of adjacent key columns as one span; a key column that is
// not adjacent to the others (`smear`, after `re`/`im`) is compared too.
#[test]
fn key_fields_are_compared_with_their_boundaries() {
    let d = twopt_text(
        "config,px,py,pz,t,re,im,smear\n\
         1,1,12,0,0,1,0,a\n1,11,2,0,0,2,0,a\n1,11,2,0,0,3,0,ab\n1,11,2,0,1,4,0,ab\n\
         1,1,12,0,1,5,0,a\n1,11,2,0,1,6,0,a\n1,11,2,0,0,7,0,b\n1,11,2,0,1,8,0,b\n",
    )
    .unwrap();
    let got: Vec<([i32; 3], Option<String>, Vec<f64>)> = d
        .channels
        .iter()
        .map(|(k, s)| (k.momentum, k.smear.clone(), s.re.clone()))
        .collect();
    assert_eq!(
        got,
        vec![
            ([1, 12, 0], Some("a".into()), vec![1.0, 5.0]),
            ([11, 2, 0], Some("a".into()), vec![2.0, 6.0]),
            ([11, 2, 0], Some("ab".into()), vec![3.0, 4.0]),
            ([11, 2, 0], Some("b".into()), vec![7.0, 8.0]),
        ]
    );
}

// Reference: the manifest's streaming SHA-256 of the whole file (report::manifest::sha256_file,
// checked against the FIPS 180-4 test vectors in its unit tests); the digest taken while
// reading must be the same, with the same size.
// The digest must not depend on the number of worker threads: one and three are checked.
#[test]
fn tables_are_hashed_while_read() {
    let root = crate::common::repo_root();
    let two = root.join("demo-data/pion/twopt.csv");
    let three = root.join("demo-data/pion/threept.csv");
    for threads in [1, 3] {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            let ds = io::read_dataset(&two, Some(&three), &io::ReadOptions::default()).unwrap();
            assert_eq!(ds.digests.len(), 2);
            for (d, p) in ds.digests.iter().zip([&two, &three]) {
                let (sha, bytes) = formfactory::report::manifest::sha256_file(p).unwrap();
                assert_eq!((&d.path, &d.sha256, d.bytes), (p, &sha, bytes), "{threads}");
            }
            let one = f("twopt_sources.csv");
            let ds = io::read_dataset(&one, None, &io::ReadOptions::default()).unwrap();
            let (sha, _) = formfactory::report::manifest::sha256_file(&one).unwrap();
            assert_eq!(ds.digests[0].sha256, sha);
        });
    }
}

// A read that stops at a bad row while its hashing reader is part way through the file gives
// the row's error (file, line, column), the same with one worker thread and with several.
#[test]
fn a_hashed_read_that_stops_early_reports_its_row() {
    let root = crate::common::repo_root();
    let text = std::fs::read_to_string(root.join("demo-data/pion/threept.csv")).unwrap();
    let mut lines: Vec<String> = text.lines().map(String::from).collect();
    lines[99] = lines[99].replacen(",V", ",X", 1);
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("threept.csv");
    std::fs::write(&bad, lines.join("\n") + "\n").unwrap();
    let two = root.join("demo-data/pion/twopt.csv");
    let errors: Vec<String> = [1, 3]
        .into_iter()
        .map(|threads| {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            pool.install(|| {
                io::read_dataset(&two, Some(&bad), &io::ReadOptions::default())
                    .err()
                    .map(|e| e.to_string())
                    .unwrap_or_default()
            })
        })
        .collect();
    assert!(errors[0].contains(":100:"), "{}", errors[0]);
    assert!(errors[0].contains("unknown current"), "{}", errors[0]);
    assert_eq!(errors[0], errors[1]);
}
