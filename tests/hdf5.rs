//! HDF5 input: fixtures written by h5py (tests/fixtures/hdf5/make_fixtures.py, an independent
//! writer) read back exactly, the data rules of the CSV path, damaged files, the packed file,
//! and a pipeline from HDF5 against the same pipeline from CSV.
//!
//! Everything that reads HDF5 needs the `hdf5` feature; a build without it is checked for
//! its message instead.

use crate::common::*;
use formfactory::io::hdf5::Hdf5Source;
use std::path::Path;

#[cfg(not(feature = "hdf5"))]
#[test]
fn without_the_feature_an_hdf5_source_says_how_to_enable_it() {
    let dir = tempdir();
    let text = std::fs::read_to_string(repo_root().join("pipelines/pion-vector-hdf5.yaml"))
        .unwrap()
        .replace("../", &format!("{}/", repo_root().display()));
    let p = dir.path().join("p.yaml");
    std::fs::write(&p, text).unwrap();
    let o = formfactory(dir.path(), &["check", p.to_str().unwrap()]);
    assert!(!o.status.success());
    let e = stderr(&o);
    assert!(
        e.contains("--features hdf5") && e.contains("libhdf5-dev"),
        "{e}"
    );
    let o = formfactory(dir.path(), &["pack", "x", "--out", "y.h5"]);
    assert!(stderr(&o).contains("--features hdf5"), "{}", stderr(&o));
}

#[test]
fn mapping_errors_name_the_setting() {
    let bad = [
        (
            "{twopt: '/a/{px}_{py}_{pz}', threept: /b}",
            "exactly one of",
        ),
        (
            "{files: c.h5, twopt: '/a/{px}_{py}_{pz}', threept: /b}",
            "no `{config}`",
        ),
        (
            "{files: 'c{config}.h5', twopt: '/a/{px}_{py}_{pz}/{current}', threept: /b}",
            "does not belong",
        ),
        (
            "{files: 'c{config}.h5', twopt: '/a/{px}_{py}_{pz}', threept: '/b/{tsep}'}",
            "not in `fixed`",
        ),
        ("{packed: x.h5, twopt: '/a'}", "describes itself"),
    ];
    for (yaml, want) in bad {
        let src: Hdf5Source = serde_yaml_ng::from_str(yaml).unwrap();
        let e = src
            .resolve(Path::new("."), "data.hdf5")
            .unwrap_err()
            .to_string();
        assert!(e.contains("data.hdf5") && e.contains(want), "{yaml}: {e}");
    }
}

#[cfg(feature = "hdf5")]
mod with_library {
    use super::*;
    use formfactory::data::{
        Current, Operators, Projector, Series, ThreePointData, ThreePointKey, TwoPointData,
        TwoPointKey,
    };
    use formfactory::io::hdf5::{read_packed, read_source, write_packed, Mapping};
    use std::collections::BTreeMap;

    /// A mapping over the fixture directory.
    fn mapping(yaml: &str) -> Mapping {
        let src: Hdf5Source = serde_yaml_ng::from_str(yaml).unwrap();
        src.resolve(&fixture("hdf5"), "data.hdf5").unwrap()
    }

    const PERCFG: &str =
        "{files: 'percfg/conf{config}.h5', twopt: '/2pt/{smear}/p{px}_{py}_{pz}', \
        threept: '/3pt/tsep{tsep}/{current}/{projector}/pf{pfx}{pfy}{pfz}_q{qx}_{qy}_{qz}'}";

    /// The values the writer script wrote, as text parsed here (Rust's parse is correctly
    /// rounded, so the doubles are exactly Python's).
    fn expected() -> BTreeMap<String, Vec<[f64; 2]>> {
        let text = std::fs::read_to_string(fixture("hdf5/expected.json")).unwrap();
        let raw: BTreeMap<String, Vec<[String; 2]>> = serde_json::from_str(&text).unwrap();
        raw.into_iter()
            .map(|(k, v)| {
                let v = v
                    .iter()
                    .map(|[a, b]| [a.parse().unwrap(), b.parse().unwrap()])
                    .collect();
                (k, v)
            })
            .collect()
    }

    fn key2(p: [i32; 3], smear: Option<&str>) -> TwoPointKey {
        TwoPointKey {
            momentum: p,
            smear: smear.map(str::to_string),
            ops: None,
        }
    }

    fn key3(tsep: u32, current: Current) -> ThreePointKey {
        ThreePointKey {
            tsep,
            pf: [0, 0, 0],
            q: [0, 0, 1],
            current,
            projector: Projector::Unpol,
            flavor: None,
            diagram: None,
            ops: None,
        }
    }

    #[test]
    fn per_configuration_files_read_back_what_h5py_wrote() {
        // f64 little- and big-endian, f32 widened, complex128 as compound {r, i}; time axes
        // longer than needed are cut (two-point to T = 8, three-point to tsep + 1); the
        // integer dataset /meta/note (one in each file) matches no template and is ignored.
        let (two, three, notes) = read_source(&mapping(PERCFG), Some(8), &|_, _| {}).unwrap();
        let exp = expected();
        assert_eq!(two.configs, vec![100, 104, 108, 112]);
        assert_eq!(two.channels.len(), 6);
        assert_eq!(three.channels.len(), 4);
        let mut compared = 0;
        for (i, cfg) in two.configs.iter().enumerate() {
            for smear in ["SS", "SP"] {
                for p in [[0, 0, 0], [0, 0, 1], [1, 0, 0]] {
                    let s = &two.channels[&key2(p, Some(smear))];
                    let want = &exp[&format!("2pt {smear} {} {} {} {cfg}", p[0], p[1], p[2])];
                    assert_eq!(s.n_t, 8);
                    for (t, w) in want.iter().enumerate() {
                        assert_eq!([s.re[s.index(t, i)], s.im[s.index(t, i)]], *w);
                        compared += 1;
                    }
                }
            }
            for tsep in [2, 3] {
                for (cur, name) in [(Current::V4, "V4"), (Current::A3, "A3")] {
                    let s = &three.channels[&key3(tsep, cur)];
                    let want = &exp[&format!("3pt {tsep} {name} {cfg}")];
                    assert_eq!(s.n_t, tsep as usize + 1);
                    for (t, w) in want.iter().enumerate() {
                        assert_eq!([s.re[s.index(t, i)], s.im[s.index(t, i)]], *w);
                        compared += 1;
                    }
                }
            }
        }
        assert_eq!(compared, 4 * (6 * 8 + 2 * 3 + 2 * 4));
        // each of the four files holds one /meta/note
        assert!(
            notes.iter().any(|n| n.contains("ignored 4 dataset(s)")),
            "{notes:?}"
        );
    }

    #[test]
    fn sources_in_the_path_are_averaged() {
        let m = mapping(
            "{files: 'sources/conf{config}.h5', twopt: '/src{source}/p{px}_{py}_{pz}', \
             threept: '/src{source}/c3/tsep{tsep}_{current}', \
             fixed: {projector: unpol, pfx: '0', pfy: '0', pfz: '0', qx: '0', qy: '0', qz: '1'}}",
        );
        let (two, three, notes) = read_source(&m, None, &|_, _| {}).unwrap();
        let exp = expected();
        for (i, cfg) in two.configs.iter().enumerate() {
            for p in [[0, 0, 0], [0, 0, 1]] {
                let s = &two.channels[&key2(p, None)];
                let want = &exp[&format!("src {} {} {} {cfg}", p[0], p[1], p[2])];
                for (t, w) in want.iter().enumerate() {
                    assert_eq!([s.re[s.index(t, i)], s.im[s.index(t, i)]], *w);
                }
            }
        }
        assert_eq!(three.channels.len(), 1);
        assert!(
            notes.iter().any(|n| n.contains("between 2 and 2 sources")),
            "{notes:?}"
        );
    }

    #[test]
    fn one_file_with_a_configuration_axis() {
        let m = mapping(
            "{file: onefile.h5, configs: /configs, twopt: '/c2/p{px}{py}{pz}', \
             threept: '/c3/tsep{tsep}/{current}', \
             fixed: {projector: unpol, pfx: '0', pfy: '0', pfz: '0', qx: '0', qy: '0', qz: '1'}}",
        );
        let (two, three, _) = read_source(&m, Some(8), &|_, _| {}).unwrap();
        let exp = expected();
        assert_eq!(two.configs, vec![100, 104, 108, 112]);
        for (i, cfg) in two.configs.iter().enumerate() {
            for p in [[0, 0, 0], [0, 0, 1], [1, 0, 0]] {
                let s = &two.channels[&key2(p, None)];
                let want = &exp[&format!("one {} {} {} {cfg}", p[0], p[1], p[2])];
                for (t, w) in want.iter().enumerate() {
                    assert_eq!([s.re[s.index(t, i)], s.im[s.index(t, i)]], *w);
                }
            }
        }
        assert_eq!(three.channels.len(), 2);
    }

    /// Read `file` (copied in as the only configuration) with a two-point mapping.
    fn read_single(file: &Path) -> String {
        let dir = tempdir();
        std::fs::copy(file, dir.path().join("conf1.h5")).unwrap();
        let src: Hdf5Source = serde_yaml_ng::from_str(
            "{files: 'conf{config}.h5', twopt: '/2pt/{smear}/p{px}_{py}_{pz}', \
             threept: '/3pt/tsep{tsep}/{current}/{projector}/pf{pfx}{pfy}{pfz}_q{qx}_{qy}_{qz}'}",
        )
        .unwrap();
        let m = src.resolve(dir.path(), "data.hdf5").unwrap();
        match read_source(&m, Some(8), &|_, _| {}) {
            Ok(_) => String::new(),
            Err(e) => e.to_string(),
        }
    }

    #[test]
    fn wrong_types_ranks_and_values_are_refused_with_file_and_dataset() {
        for (file, want) in [
            ("bad_integer.h5", "integer data"),
            ("bad_compound.h5", "not a complex number"),
            ("bad_rank.h5", "expected 2 axes (time, 2)"),
            ("bad_nan.h5", "non-finite value"),
            ("expected.json", "not an HDF5 file"),
        ] {
            let e = read_single(&fixture("hdf5").join(file));
            assert!(e.contains("conf1.h5") && e.contains(want), "{file}: {e}");
            if file != "expected.json" {
                assert!(e.contains("/2pt/SS/p0_0_0"), "{file}: {e}");
            }
        }
    }

    #[test]
    fn a_missing_dataset_is_named_with_the_nearest_existing_path() {
        let m = mapping(&PERCFG.replace("percfg/", "missing/"));
        let e = read_source(&m, Some(8), &|_, _| {})
            .unwrap_err()
            .to_string();
        assert!(e.contains("conf104.h5"), "{e}");
        assert!(e.contains("`/2pt/SP/p0_0_1` is missing"), "{e}");
        assert!(e.contains("nearest existing path: `/2pt/SP/p0_0_0`"), "{e}");
    }

    #[test]
    fn too_short_time_axis_and_duplicates_are_refused() {
        let e = read_source(&mapping(PERCFG), Some(12), &|_, _| {})
            .unwrap_err()
            .to_string();
        assert!(e.contains("has 10 time slices; 12 are needed"), "{e}");
        // conf100.h5 and conf0100.h5 are both configuration 100: every dataset twice.
        let dir = tempdir();
        for name in ["conf100.h5", "conf0100.h5"] {
            std::fs::copy(fixture("hdf5/percfg/conf100.h5"), dir.path().join(name)).unwrap();
        }
        let src: Hdf5Source = serde_yaml_ng::from_str(&PERCFG.replace("percfg/", "")).unwrap();
        let m = src.resolve(dir.path(), "data.hdf5").unwrap();
        let e = read_source(&m, Some(8), &|_, _| {})
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("duplicate data") && e.contains("conf100.h5"),
            "{e}"
        );
    }

    #[test]
    fn truncated_files_give_errors() {
        let dir = tempdir();
        let bytes = std::fs::read(fixture("hdf5/percfg/conf100.h5")).unwrap();
        for cut in [0, 7, 100, 1000, bytes.len() / 2, bytes.len() - 10] {
            let f = dir.path().join("t.h5");
            std::fs::write(&f, &bytes[..cut]).unwrap();
            let e = read_single(&f);
            assert!(!e.is_empty() && e.contains("conf1.h5"), "cut {cut}: {e}");
        }
    }

    /// `formfactory convert PACKED --out DIR/csv`; the CSV directory.
    fn convert_to_csv(dir: &std::path::Path, packed: &std::path::Path) -> std::path::PathBuf {
        let out = dir.join("csv");
        let o = formfactory(
            dir,
            &[
                "convert",
                packed.to_str().unwrap(),
                "--out",
                out.to_str().unwrap(),
            ],
        );
        assert!(o.status.success(), "{}", stderr(&o));
        out
    }

    #[test]
    fn packed_file_round_trip_and_csv_convert() {
        let (two, three, _) = read_source(&mapping(PERCFG), Some(8), &|_, _| {}).unwrap();
        let dir = tempdir();
        let packed = dir.path().join("ens.h5");
        write_packed(&packed, &two, &three).unwrap();
        let (two2, three2) = read_packed(&packed).unwrap();
        assert_eq!(two, two2);
        assert_eq!(three, three2);
        let out = convert_to_csv(dir.path(), &packed);
        let back = formfactory::io::read_dataset(
            &out.join("twopt.csv"),
            Some(&out.join("threept.csv")),
            &Default::default(),
        )
        .unwrap();
        assert_eq!(back.twopt, two);
        assert_eq!(back.threept.unwrap(), three);
        // inspect reads the packed file
        let o = formfactory(dir.path(), &["inspect", packed.to_str().unwrap()]);
        assert!(o.status.success(), "{}", stderr(&o));
        assert!(stdout(&o).contains("configurations: 4"), "{}", stdout(&o));
    }

    /// `operator_value` of tests/fixtures/hdf5/make_fixtures.py (dyadic, so exact).
    fn operator_value(cfg_index: usize, pair: usize, t: usize) -> [f64; 2] {
        let (c, p, t) = (cfg_index as f64, pair as f64, t as f64);
        [1.0 + c / 4.0 + t / 8.0 + 2.0 * p, -t / 16.0 - p / 32.0]
    }

    #[test]
    fn operator_labels_in_the_path_survive_pack_and_convert() {
        let m = mapping(
            "{files: 'operators/conf{config}.h5', \
             twopt: '/2pt/p{px}_{py}_{pz}/snk_{sink_op}/src_{source_op}', \
             threept: '/3pt/tsep{tsep}/{current}/snk_{sink_op}/src_{source_op}', \
             fixed: {projector: unpol, pfx: '0', pfy: '0', pfz: '0', qx: '0', qy: '0', qz: '1'}}",
        );
        let (two, three, _) = read_source(&m, None, &|_, _| {}).unwrap();
        assert_eq!(two.configs, vec![100, 104]);
        assert_eq!((two.channels.len(), three.channels.len()), (4, 2));
        let ops = ["g5", "g4g5"];
        for (a, sink) in ops.iter().enumerate() {
            for (b, source) in ops.iter().enumerate() {
                let pair = 2 * a + b;
                let mut k = key2([0, 0, 0], None);
                k.ops = Some(Operators::new(sink, source));
                let s = &two.channels[&k];
                let mut k3 = key3(2, Current::V4);
                k3.ops = Some(Operators::new(sink, source));
                let s3 = three.channels.get(&k3);
                assert_eq!(s3.is_some(), a == b, "{k3:?}");
                for i in 0..2 {
                    for t in 0..4 {
                        let got = [s.re[s.index(t, i)], s.im[s.index(t, i)]];
                        assert_eq!(got, operator_value(i, pair, t));
                    }
                    for (tau, s3) in s3.iter().flat_map(|s| (0..3).map(move |t| (t, s))) {
                        let got = [s3.re[s3.index(tau, i)], s3.im[s3.index(tau, i)]];
                        assert_eq!(got, operator_value(i, pair + 8, tau));
                    }
                }
            }
        }
        // pack, read back, convert to CSV (sink_op / source_op columns) and read that back
        let dir = tempdir();
        let packed = dir.path().join("ops.h5");
        write_packed(&packed, &two, &three).unwrap();
        assert_eq!(read_packed(&packed).unwrap(), (two.clone(), three.clone()));
        let out = convert_to_csv(dir.path(), &packed);
        let header = std::fs::read_to_string(out.join("twopt.csv")).unwrap();
        assert!(
            header
                .lines()
                .next()
                .unwrap()
                .ends_with("sink_op,source_op"),
            "{header}"
        );
        let back = formfactory::io::read_dataset(
            &out.join("twopt.csv"),
            Some(&out.join("threept.csv")),
            &Default::default(),
        )
        .unwrap();
        assert_eq!(back.twopt, two);
        assert_eq!(back.threept.unwrap(), three);
    }

    #[test]
    fn pion_demo_from_hdf5_equals_the_csv_tables() {
        // The per-configuration demo files were written by h5py from the CSV text; the packed
        // file by `formfactory pack`. All three sources must give identical data.
        let csv = formfactory::io::read_dataset(
            &repo_root().join("demo-data/pion/twopt.csv"),
            Some(&repo_root().join("demo-data/pion/threept.csv")),
            &Default::default(),
        )
        .unwrap();
        for name in ["pion-vector-hdf5", "pion-vector-packed"] {
            let plan = formfactory::pipeline::load(
                &repo_root().join(format!("pipelines/{name}.yaml")),
                &[],
            )
            .unwrap();
            let ds =
                formfactory::pipeline::read_source(&plan, &Default::default(), &|_, _| {}).unwrap();
            assert_eq!(ds.twopt, csv.twopt, "{name}");
            assert_eq!(ds.threept, csv.threept, "{name}");
        }
    }

    #[test]
    fn pipeline_from_hdf5_gives_the_csv_results_bit_for_bit() {
        let dir = tempdir();
        let mut outputs = Vec::new();
        for name in ["pion-vector", "pion-vector-hdf5"] {
            let out = dir.path().join(name);
            let p = format!("pipelines/{name}.yaml");
            let o = formfactory(
                &repo_root(),
                &["run", &p, "--out", out.to_str().unwrap(), "--quiet"],
            );
            assert!(o.status.success(), "{name}: {}", stderr(&o));
            let read = |f: &str| std::fs::read_to_string(out.join(f)).unwrap();
            outputs.push((read("formfactors.csv"), read("derived.csv")));
        }
        assert!(outputs[0].0.lines().count() > 3);
        assert_eq!(outputs[0], outputs[1]);
    }

    #[test]
    fn check_and_inspect_accept_an_hdf5_pipeline() {
        let o = formfactory(&repo_root(), &["check", "pipelines/pion-vector-hdf5.yaml"]);
        assert!(o.status.success(), "{}", stderr(&o));
        assert!(stdout(&o).contains("100 configurations"), "{}", stdout(&o));
        let o = formfactory(
            &repo_root(),
            &["inspect", "pipelines/pion-vector-hdf5.yaml"],
        );
        assert!(o.status.success(), "{}", stderr(&o));
        assert!(stdout(&o).contains("momenta (6)"), "{}", stdout(&o));
    }

    #[test]
    fn a_pipeline_named_without_a_directory_finds_its_files() {
        // `check p.yaml` in the pipeline's own directory: the file template is relative to an
        // empty directory name, which is the working directory (it found no file before).
        let dir = tempfile::tempdir().unwrap();
        let demo = repo_root().join("demo-data/pion-hdf5");
        for entry in std::fs::read_dir(&demo).unwrap() {
            let path = entry.unwrap().path();
            std::fs::copy(&path, dir.path().join(path.file_name().unwrap())).unwrap();
        }
        let text = std::fs::read_to_string(repo_root().join("pipelines/pion-vector-hdf5.yaml"))
            .unwrap()
            .replace("../demo-data/pion-hdf5/cfg{config}.h5", "cfg{config}.h5");
        assert!(text.contains("files: cfg{config}.h5"));
        std::fs::write(dir.path().join("p.yaml"), text).unwrap();
        let o = formfactory(dir.path(), &["check", "p.yaml"]);
        assert!(o.status.success(), "{}", stderr(&o));
        assert!(stdout(&o).contains("100 configurations"), "{}", stdout(&o));
    }

    /// Data with `n2` two-point and `n3` three-point channels on `n_cfg` configurations
    /// (two-point `T = 16`, three-point `tsep` 4, 6, 8), seeded values; the two-point
    /// channels at momenta (0,0,k), one of them negative at t = 1 on some configurations.
    fn many_channels(n2: usize, n3: usize, n_cfg: usize) -> (TwoPointData, ThreePointData) {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(15);
        let mut series = |n_t: usize| {
            let mut s = Series::zeros(n_t, n_cfg);
            for (v, w) in s.re.iter_mut().zip(s.im.iter_mut()) {
                *v = rng.gen_range(0.5..1.5);
                *w = rng.gen_range(-0.1..0.1);
            }
            s
        };
        let configs: Vec<i64> = (0..n_cfg as i64).map(|c| 10 + 2 * c).collect();
        let mut two = TwoPointData {
            configs: configs.clone(),
            channels: BTreeMap::new(),
        };
        for k in 0..n2 {
            let mut s = series(16);
            if k == 0 {
                for c in (0..n_cfg).step_by(7) {
                    s.re[n_cfg + c] = -0.25;
                }
            }
            two.channels.insert(key2([0, 0, k as i32], Some("SS")), s);
        }
        let mut three = ThreePointData {
            configs,
            channels: BTreeMap::new(),
        };
        for k in 0..n3 {
            let mut key = key3([4, 6, 8][k % 3], Current::V4);
            key.q = [0, 0, (k / 3) as i32];
            let s = series(key.tsep as usize + 1);
            three.channels.insert(key, s);
        }
        (two, three)
    }

    /// `inspect`'s text of what `data` holds, its autocorrelation check from `autocorr`.
    /// Bytes of the values (real and imaginary f64) both tables hold.
    fn value_bytes(two: &TwoPointData, three: &ThreePointData) -> usize {
        two.channels
            .values()
            .chain(three.channels.values())
            .map(|s| 16 * s.re.len())
            .sum()
    }

    fn render(
        data: &formfactory::io::inspect::Inspected,
        autocorr: &[formfactory::resample::autocorr_check::PointAutocorr],
    ) -> String {
        formfactory::io::inspect::render(data, autocorr)
    }

    #[test]
    fn inspect_of_a_packed_file_streams_and_says_what_the_whole_data_say() {
        use formfactory::resample::autocorr_check::{check, check_points};
        let dir = tempdir();
        let files = [
            ("demo", repo_root().join("demo-data/pion.packed.h5")),
            ("many", dir.path().join("many.h5")),
            ("fixture", dir.path().join("fixture.h5")),
        ];
        let (two, three) = many_channels(24, 300, 200);
        write_packed(&files[1].1, &two, &three).unwrap();
        let (two, three, _) = read_source(&mapping(PERCFG), Some(8), &|_, _| {}).unwrap();
        write_packed(&files[2].1, &two, &three).unwrap();
        for (name, file) in &files {
            // streamed: one channel at a time
            let (streamed, peak) =
                crate::common::alloc::peak_bytes(|| formfactory::io::inspect::read(file).unwrap());
            let text = render(&streamed, &check_points(streamed.points()));
            // loaded: the whole data, the autocorrelation check on the whole data
            let ((two, three), whole) =
                crate::common::alloc::peak_bytes(|| read_packed(file).unwrap());
            let autocorr = check(Some(&two), Some(&three));
            let loaded = formfactory::io::inspect::from_data(file, two.clone(), three.clone());
            assert_eq!(text, render(&loaded, &autocorr), "{name}");
            assert!(
                text.contains("autocorrelation") && text.contains("tau="),
                "{name}: {text}"
            );
            // Bounded: the walk holds one channel's values and the keys, not the data (the
            // whole read's peak is the data, which the counter must see for this to mean
            // anything).
            let values = value_bytes(&two, &three);
            assert!(whole >= values, "{name}: {whole} < {values}");
            if *name == "many" {
                assert!(
                    text.contains("configuration(s) have Re C2 <= 0 at t=1"),
                    "{text}"
                );
                assert!(
                    peak < values / 20,
                    "{name}: streamed inspect peaked at {peak} bytes for {values} bytes of values"
                );
            }
        }
    }

    #[test]
    fn check_of_a_packed_source_streams_and_gives_the_csv_verdicts() {
        let dir = tempdir();
        let pipeline =
            std::fs::read_to_string(repo_root().join("pipelines/pion-vector-packed.yaml")).unwrap();
        let packed_line = pipeline
            .lines()
            .find(|l| l.contains("packed:"))
            .unwrap()
            .to_string();
        let csv = formfactory::io::read_dataset(
            &repo_root().join("demo-data/pion/twopt.csv"),
            Some(&repo_root().join("demo-data/pion/threept.csv")),
            &Default::default(),
        )
        .unwrap();
        let (two, three) = (csv.twopt, csv.threept.unwrap());
        // The same data as the committed packed file, and three damaged copies: a constant
        // three-point channel, a two-point value too large for its variance, a shorter time
        // axis than `ensemble.T` asks for.
        let mut constant = three.clone();
        let c = constant.channels.values_mut().nth(5).unwrap();
        c.re.iter_mut().for_each(|v| *v = 0.5);
        c.im.iter_mut().for_each(|v| *v = 0.0);
        let mut huge = two.clone();
        huge.channels.values_mut().nth(2).unwrap().re[17] = 3e120;
        // beyond t = 24 (at t = 40), which `ensemble.T = 24` cuts away on reading
        let mut huge_late = two.clone();
        huge_late.channels.values_mut().nth(2).unwrap().re[40 * 100 + 3] = 3e120;
        let none: Vec<&str> = Vec::new();
        // (case, data, --set, what the verdict says, whether the CSV path says the same)
        let cases = [
            (
                "intact",
                two.clone(),
                three.clone(),
                none.clone(),
                "valid;",
                true,
            ),
            (
                "constant",
                two.clone(),
                constant,
                none.clone(),
                "does not fluctuate",
                true,
            ),
            ("huge", huge, three.clone(), none.clone(), "overflow", true),
            (
                "tsep selection",
                two.clone(),
                three.clone(),
                vec!["ratio.tsep=[9]"],
                "valid;",
                true,
            ),
            // the packed reader cuts the time axis to T (the CSV path asks T to match)
            (
                "short T",
                two.clone(),
                three.clone(),
                vec!["ensemble.T=60"],
                "has 48 time slices; the ensemble's T = 60 needs that many",
                false,
            ),
            (
                "cut T",
                huge_late,
                three.clone(),
                vec!["ensemble.T=24"],
                "valid;",
                false,
            ),
        ];
        for (name, two, three, sets, expect, same_as_csv) in cases {
            let case = dir.path().join(name.replace(' ', "_"));
            std::fs::create_dir_all(&case).unwrap();
            let packed = case.join("ens.h5");
            write_packed(&packed, &two, &three).unwrap();
            formfactory::io::write_twopt(
                &two,
                std::fs::File::create(case.join("twopt.csv")).unwrap(),
            )
            .unwrap();
            formfactory::io::write_threept(
                &three,
                std::fs::File::create(case.join("threept.csv")).unwrap(),
            )
            .unwrap();
            let from_packed =
                pipeline.replace(&packed_line, &format!("    packed: {}", packed.display()));
            std::fs::write(case.join("packed.yaml"), &from_packed).unwrap();
            let from_csv = pipeline.replace(
                &format!("  hdf5:\n{packed_line}"),
                &format!(
                    "  twopt: {}\n  threept: {}",
                    case.join("twopt.csv").display(),
                    case.join("threept.csv").display()
                ),
            );
            assert_ne!(from_csv, pipeline, "the pipeline's data section changed");
            std::fs::write(case.join("csv.yaml"), &from_csv).unwrap();
            let run = |yaml: &str| {
                let sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
                crate::common::alloc::peak_bytes(|| {
                    formfactory::pipeline::check(&case.join(yaml), &sets)
                })
            };
            let ((packed_verdict, peak), (csv_verdict, _)) = (run("packed.yaml"), run("csv.yaml"));
            let values = value_bytes(&two, &three);
            assert!(
                peak < values / 4,
                "{name}: check peaked at {peak} bytes for {values} bytes of values"
            );
            // The verdicts agree but for the name of the input (`data.hdf5` or the table).
            let text = |r: formfactory::Result<String>, yaml: &str| {
                let t = match r {
                    Ok(s) => s,
                    Err(e) => format!("error: {e}"),
                };
                let mut t = t.replace(&case.join(yaml).display().to_string(), "PIPELINE");
                for table in ["twopt.csv", "threept.csv"] {
                    t = t.replace(&case.join(table).display().to_string(), "data.hdf5");
                }
                t.replace(&packed.display().to_string(), "data.hdf5")
            };
            let (p, c) = (
                text(packed_verdict, "packed.yaml"),
                text(csv_verdict, "csv.yaml"),
            );
            assert!(p.contains(expect), "{name}: {p}");
            if same_as_csv {
                assert_eq!(p, c, "{name}");
            }
        }
    }

    #[test]
    fn pack_refuses_to_overwrite_and_packs_csv_tables() {
        let dir = tempdir();
        let out = dir.path().join("p.h5");
        std::fs::write(&out, "keep me").unwrap();
        let o = formfactory(
            &repo_root(),
            &["pack", "demo-data/pion", "--out", out.to_str().unwrap()],
        );
        assert!(!o.status.success());
        assert_eq!(std::fs::read_to_string(&out).unwrap(), "keep me");
        let o = formfactory(
            &repo_root(),
            &[
                "pack",
                "demo-data/pion",
                "--out",
                out.to_str().unwrap(),
                "--force",
                "--quiet",
            ],
        );
        assert!(o.status.success(), "{}", stderr(&o));
        let committed = read_packed(&repo_root().join("demo-data/pion.packed.h5")).unwrap();
        assert_eq!(read_packed(&out).unwrap(), committed);
    }

    #[test]
    fn damaged_compound_types_are_clean_errors() {
        // Two damaged files the fuzzer found (tests/fixtures/hdf5/damaged/README.md), each read
        // by the binary in its own process, since the first one killed it with a signal.
        let dir = tempfile::tempdir().unwrap();
        let pipeline = dir.path().join("p.yaml");
        std::fs::write(
            &pipeline,
            "ensemble: {L: 24, T: 8, spacing_fm: 0.09, pion_mass: 0.14, hadron: spin1half}\n\
             data:\n  hdf5:\n    files: 'conf{config}.h5'\n    \
             twopt: '/2pt/{smear}/p{px}_{py}_{pz}'\n    \
             threept: '/3pt/tsep{tsep}/{current}/{projector}/pf{pfx}{pfy}{pfz}_q{qx}_{qy}_{qz}'\n",
        )
        .unwrap();
        for (file, want) in [
            (
                "compound_offset.h5",
                "has field \"i\" of 8 bytes at offset 33554440, past its end",
            ),
            (
                "compound_name.h5",
                "compound type with fields [\"\u{fffd}\", \"i\"] is not a complex number",
            ),
        ] {
            std::fs::copy(
                fixture(&format!("hdf5/damaged/{file}")),
                dir.path().join("conf100.h5"),
            )
            .unwrap();
            let o = formfactory(dir.path(), &["check", pipeline.to_str().unwrap()]);
            let e = stderr(&o);
            assert_eq!(o.status.code(), Some(1), "{file}: {e}");
            assert!(e.contains("conf100.h5") && e.contains(want), "{file}: {e}");
        }
    }

    #[test]
    fn fuzz_corrupted_files_give_errors_never_crashes() {
        // 1000 random corruptions (truncation, bit flips, random bytes) of an h5py
        // per-configuration file and of a packed file, each read by the binary in its own
        // process (tests/fixtures/hdf5/fuzz.py): every run must end with a result or a clean
        // error, never a signal or a hang.
        let o = std::process::Command::new("python3")
            .arg(fixture("hdf5/fuzz.py"))
            .arg(env!("CARGO_BIN_EXE_formfactory"))
            .arg("1000")
            .output()
            .expect("python3 runs");
        let out = String::from_utf8_lossy(&o.stdout);
        println!("{out}");
        assert!(o.status.success(), "{out}{}", stderr(&o));
        assert!(
            out.contains("fuzz: 1000 corrupted reads") && out.contains(" 0 crashes"),
            "{out}"
        );
    }
}
