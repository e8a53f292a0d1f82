//! `inspect` and `check` of CSV tables read one channel at a time (`io/by_channel.rs`,
//! `io/accumulator/grouped.rs`): the verdicts of the whole read on grouped tables, on
//! tables that are not grouped (read whole), and on damaged ones; and a peak heap that does
//! not grow with the data (measured by the counting allocator of `common::alloc`).

use crate::common::alloc::peak_bytes;
use crate::common::{repo_root, tempdir};
use formfactory::data::{Series, TwoPointData, TwoPointKey};
use std::path::{Path, PathBuf};

/// The pion demo ensemble (its mock spec) with `configs` configurations, so that its tables
/// span several of the reader's 4 MB batches (channels close at batch ends), in `dir/data`.
fn pion_data(dir: &Path, configs: usize) -> PathBuf {
    let spec = std::fs::read_to_string(repo_root().join("demo-data/pion.mock.yaml")).unwrap();
    assert!(spec.contains("\n  configs: 100\n"));
    let path = dir.join("pion.mock.yaml");
    let more = spec.replace("\n  configs: 100\n", &format!("\n  configs: {configs}\n"));
    std::fs::write(&path, more).unwrap();
    let data = dir.join("data");
    formfactory::mock::generate_from_file(&path, &data, false).unwrap();
    data
}

/// The lines of a table: its header and its rows grouped into runs of one channel (the key
/// columns `key` equal).
fn channels(path: &Path, key: &[usize]) -> (String, Vec<Vec<String>>) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap().to_string();
    let mut runs: Vec<Vec<String>> = Vec::new();
    let mut last: Option<Vec<String>> = None;
    for line in lines {
        let fields: Vec<&str> = line.split(',').collect();
        let k: Vec<String> = key.iter().map(|&i| fields[i].to_string()).collect();
        if last.as_ref() != Some(&k) {
            runs.push(Vec::new());
            last = Some(k);
        }
        runs.last_mut().unwrap().push(line.to_string());
    }
    (header, runs)
}

fn write_table(path: &Path, header: &str, runs: &[Vec<String>]) {
    let mut text = format!("{header}\n");
    for line in runs.iter().flatten() {
        text.push_str(line);
        text.push('\n');
    }
    std::fs::write(path, text).unwrap();
}

fn text(r: formfactory::Result<String>) -> String {
    match r {
        Ok(s) => s,
        Err(e) => format!("error: {e}"),
    }
}

/// The text of `inspect` of a pipeline's data as it was before streaming: the tables read
/// whole (`io::read_dataset`), then described.
fn inspect_whole(pipeline: &Path, two: &Path, three: &Path) -> String {
    use formfactory::resample::autocorr_check::check_points;
    let ds = match formfactory::io::read_dataset(two, Some(three), &Default::default()) {
        Ok(ds) => ds,
        Err(e) => return format!("error: {e}"),
    };
    let data = formfactory::io::inspect::from_data(pipeline, ds.twopt, ds.threept.unwrap());
    formfactory::io::inspect::render(&data, &check_points(data.points()))
}

#[test]
fn inspect_and_check_of_csv_tables_give_the_whole_reads_verdicts() {
    let dir = tempdir();
    let data = pion_data(dir.path(), 500);
    let two_key = [1, 2, 3];
    let three_key = [1, 3, 4, 5, 6, 7, 8, 9, 10];
    let (h2, g2) = channels(&data.join("twopt.csv"), &two_key);
    let (h3, g3) = channels(&data.join("threept.csv"), &three_key);
    let (m2, m3) = (g2.len() / 2, g3.len() / 2);
    assert!(g2.len() >= 6 && g3.len() >= 40, "{} {}", g2.len(), g3.len());
    let drop_config = |run: &[String], c: &str| -> Vec<String> {
        run.iter()
            .filter(|l| !l.starts_with(&format!("{c},")))
            .cloned()
            .collect()
    };
    type Edit = Box<dyn Fn(&mut Vec<Vec<String>>, &mut Vec<Vec<String>>)>;
    // (case, edit of the two- and three-point channel runs, whether the tables stay valid)
    let cases: Vec<(&str, Edit, bool)> = vec![
        ("grouped", Box::new(|_, _| {}), true),
        (
            // the first channel of each table moved to its end, a middle one split in two
            "not grouped",
            Box::new(move |two, three| {
                let first = two.remove(0);
                two.push(first);
                let first = three.remove(0);
                three.push(first);
                let half = three[m3].len() / 2;
                let tail = three[m3].split_off(half);
                three.push(tail);
            }),
            true,
        ),
        (
            // a configuration the first channel lacks, seen only in the channels after it
            "missing configuration in the first channel",
            Box::new(move |two, _| two[0] = drop_config(&two[0], "1400")),
            false,
        ),
        (
            "missing configuration in a middle channel",
            Box::new(move |_, three| three[m3] = drop_config(&three[m3], "1804")),
            false,
        ),
        (
            "a configuration only the last channel has",
            Box::new(|_, three| {
                let last = three.last_mut().unwrap();
                let extra = last[0].replacen(&last[0][..4], "99999", 1);
                last.push(extra);
            }),
            false,
        ),
        (
            "one missing row",
            Box::new(move |_, three| {
                three[m3 + 1].remove(700);
            }),
            false,
        ),
        (
            "a two-point channel without its last time slice",
            Box::new(move |two, _| {
                let n = two[m2].len();
                two[m2].truncate(n - 500);
            }),
            false,
        ),
        (
            "truncated inside a channel",
            Box::new(move |_, three| {
                three.truncate(m3 + 1);
                let n = three[m3].len();
                three[m3].truncate(n / 3);
            }),
            false,
        ),
        (
            // fewer channels: another valid ensemble
            "truncated after a channel",
            Box::new(move |_, three| three.truncate(m3 + 3)),
            true,
        ),
        (
            "a bad float",
            Box::new(move |_, three| {
                let line = &mut three[m3][17];
                *line = format!("{},1.2.3,0.5", line.rsplitn(3, ',').nth(2).unwrap());
            }),
            false,
        ),
        (
            // the second half of a split channel repeats the last row of the first: only a
            // read that keeps the first half finds the duplicate
            "not grouped, with a duplicate row",
            Box::new(move |_, three| {
                let at = three[m3].len() / 2;
                let tail = three[m3][at - 1..].to_vec();
                three[m3].truncate(at);
                three.push(tail);
            }),
            false,
        ),
    ];
    let mut valid_texts = Vec::new();
    for (name, edit, valid) in cases {
        let case = dir.path().join(name.replace([' ', ','], "_"));
        std::fs::create_dir_all(&case).unwrap();
        let (mut two, mut three) = (g2.clone(), g3.clone());
        edit(&mut two, &mut three);
        let (p2, p3) = (case.join("twopt.csv"), case.join("threept.csv"));
        write_table(&p2, &h2, &two);
        write_table(&p3, &h3, &three);
        let pipeline = std::fs::read_to_string(repo_root().join("pipelines/pion-vector.yaml"))
            .unwrap()
            .replace("../demo-data/pion/", &format!("{}/", case.display()));
        let yaml = case.join("pipe.yaml");
        std::fs::write(&yaml, pipeline).unwrap();

        // the whole read's verdict and text
        let whole = inspect_whole(&yaml, &p2, &p3);
        assert_eq!(!whole.starts_with("error:"), valid, "{name}: {whole}");
        // streamed: a pipeline's tables, the data directory, each table
        assert_eq!(text(formfactory::pack::inspect(&yaml)), whole, "{name}");
        let dir_text =
            text(formfactory::pack::inspect(&case)).replace(&case.display().to_string(), "");
        let checked = text(formfactory::pipeline::check(&yaml, &[]));
        if valid {
            valid_texts.push((
                name,
                dir_text,
                checked.replace(&case.display().to_string(), ""),
            ));
        } else {
            // the error of the whole read: file, line, column, what was expected
            let whole = whole.replace(&case.display().to_string(), "");
            assert_eq!(dir_text, whole, "{name}");
            assert_eq!(
                checked.replace(&case.display().to_string(), ""),
                whole,
                "{name}"
            );
            for table in [&p2, &p3] {
                let t = text(formfactory::pack::inspect(table))
                    .replace(&case.display().to_string(), "");
                assert!(t == whole || !t.starts_with("error:"), "{name}: {t}");
            }
        }
    }
    // Grouped and not grouped give one text and one verdict; the truncated table is
    // another (valid) ensemble.
    assert_eq!(valid_texts[0].1, valid_texts[1].1);
    assert_eq!(valid_texts[0].2, valid_texts[1].2);
    assert!(valid_texts[0].2.contains("valid;"), "{}", valid_texts[0].2);
    assert_ne!(valid_texts[0].1, valid_texts[2].1);
}

/// A two-point table of `n` channels, 64 time slices on 250 configurations.
fn wide_twopt(n: i32) -> (TwoPointData, usize) {
    let configs: Vec<i64> = (0..250).collect();
    let mut data = TwoPointData {
        configs,
        channels: Default::default(),
    };
    for c in 0..n {
        let mut s = Series::zeros(64, 250);
        for (i, (re, im)) in s.re.iter_mut().zip(s.im.iter_mut()).enumerate() {
            let x = ((i as i64 * 7919 + c as i64 * 104_729) % 100_003) as f64;
            *re = 1.0 + x * 1.1e-6;
            *im = x * 3.3e-7 - 0.01;
        }
        let key = TwoPointKey {
            momentum: [c % 7, c / 7, 0],
            smear: None,
            ops: None,
        };
        data.channels.insert(key, s);
    }
    let values = 16 * 64 * 250 * n as usize;
    (data, values)
}

#[test]
fn inspect_of_a_csv_table_holds_one_channel_not_the_table() {
    let dir = tempdir();
    let mut peaks = Vec::new();
    for (n, name) in [(24, "a.csv"), (48, "b.csv")] {
        let (data, values) = wide_twopt(n);
        let path = dir.path().join(name);
        let file = std::fs::File::create(&path).unwrap();
        formfactory::io::write_twopt(&data, std::io::BufWriter::new(file)).unwrap();
        // On one thread: the counter sees each thread's own allocations, and the read's
        // blocks are allocated by the reading thread and freed by the parsing ones.
        let one = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap();
        let (streamed, peak) =
            one.install(|| peak_bytes(|| formfactory::pack::inspect(&path).unwrap()));
        let (whole, whole_peak) =
            one.install(|| peak_bytes(|| formfactory::io::read_twopt(&path).unwrap()));
        assert_eq!(whole, data, "{name}");
        assert!(
            streamed.contains(&format!("channels: {n}, T = 64")),
            "{streamed}"
        );
        peaks.push((values, peak, whole_peak));
    }
    let ((values_a, a, whole_a), (_, b, whole_b)) = (peaks[0], peaks[1]);
    // The whole read grows by at least the values added (the counter sees them) ...
    assert!(
        whole_b >= whole_a + values_a,
        "whole read: {whole_a} -> {whole_b} bytes for {values_a} more bytes of values"
    );
    // ... the streamed one holds what the read has in flight and one channel, whatever the
    // number of channels (a channel's values are 256 kB; the keys grow by a few kB).
    assert!(
        b < a + values_a / 16,
        "streamed inspect: {a} -> {b} bytes for {values_a} more bytes of values"
    );
    assert!(b < whole_b, "streamed {b} against whole {whole_b}");
}
