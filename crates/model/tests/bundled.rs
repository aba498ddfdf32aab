//! Every bundled target loads.
use facetcal_model::Target;

#[test]
fn bundled_targets_load() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../targets");
    let mut n = 0;
    for e in std::fs::read_dir(&dir).unwrap() {
        let p = e.unwrap().path();
        if p.extension().is_some_and(|x| x == "json") {
            let t = Target::load(&p).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
            assert!(t.feature_count() > 0);
            n += 1;
        }
    }
    assert_eq!(n, 5);
}
