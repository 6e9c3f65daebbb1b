//! Fuzzes the model-file loader: any byte string must give `Ok` (a consistent model that scores
//! finite, non-negative weights) or `Error::ModelFile`; never a panic, never another error.
#![no_main]

use libfuzzer_sys::fuzz_target;
use shiftweight::{Error, FittedRatio, MatrixView};

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    match FittedRatio::from_json(&text) {
        Err(Error::ModelFile(_)) => {}
        Err(other) => panic!("non-model-file error from the loader: {other:?}"),
        Ok(model) => {
            assert!(model
                .source_weights
                .iter()
                .all(|w| w.is_finite() && *w >= 0.0));
            let d = model.n_features();
            if d <= 64 {
                let row = vec![0.25; d];
                if let Ok(w) = model.ratio(MatrixView::new(&row, 1, d).unwrap()) {
                    assert!(
                        w[0].is_finite() && w[0] >= 0.0,
                        "accepted model scores {w:?}"
                    );
                }
            }
            // A loaded model writes a document that loads again.
            let again = model.to_json().expect("serialise");
            FittedRatio::from_json(&again).expect("reload");
        }
    }
});
