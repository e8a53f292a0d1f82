//! Fuzz the pipeline loader (YAML parsing, key positions, validation against the data files'
//! existence): a plan or a typed error, never a panic. The input is written to a pipeline file
//! in a scratch directory that also holds small data tables, so paths resolve as in real use.
#![no_main]
use libfuzzer_sys::fuzz_target;
use std::path::PathBuf;
use std::sync::OnceLock;

fn scratch() -> &'static (tempfile::TempDir, PathBuf) {
    static DIR: OnceLock<(tempfile::TempDir, PathBuf)> = OnceLock::new();
    DIR.get_or_init(|| {
        let dir = tempfile::tempdir().expect("scratch directory");
        let data = dir.path().join("data");
        std::fs::create_dir_all(&data).expect("data directory");
        std::fs::write(data.join("twopt.csv"), "config,t,px,py,pz,re,im\n1,0,0,0,0,1,0\n")
            .expect("twopt");
        std::fs::write(data.join("threept.csv"), "x\n").expect("threept");
        let file = dir.path().join("pipeline.yaml");
        (dir, file)
    })
}

fuzz_target!(|data: &[u8]| {
    let (_, file) = scratch();
    if std::fs::write(file, data).is_ok() {
        let _ = formfactory::pipeline::load(file, &[]);
    }
});
