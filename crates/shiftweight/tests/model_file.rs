//! Hostile model files: truncated, corrupted, wrong-version and hand-edited documents of every
//! model kind give `Error::ModelFile` with a clear message, never a panic, never another error.

mod common;

use common::gaussian;
use common::rng;
use serde_json::{json, Value};
use shiftweight::ratio::{Features, UniformRatio};
use shiftweight::{
    ClassifierRatio, Error, FittedRatio, KLRatio, KernelMeanMatching, LeastSquaresRatio,
    RatioEstimator,
};

fn documents() -> Vec<(&'static str, String)> {
    let s = gaussian(30, &[0.0, 0.0], 1.0, 1);
    let t = gaussian(25, &[0.5, 0.0], 1.0, 2);
    let (sv, tv) = (s.view(), t.view());
    let fits: Vec<(&'static str, FittedRatio)> = vec![
        (
            "least_squares",
            LeastSquaresRatio::new()
                .n_basis(8)
                .sigma(Some(1.0))
                .lam(Some(0.1))
                .fit(sv, tv)
                .unwrap(),
        ),
        (
            "kliep",
            KLRatio::new()
                .n_basis(8)
                .sigma(Some(1.0))
                .folds(2)
                .fit(sv, tv)
                .unwrap(),
        ),
        ("kmm", KernelMeanMatching::new().fit(sv, tv).unwrap()),
        (
            "classifier",
            ClassifierRatio::new().folds(2).fit(sv, tv).unwrap(),
        ),
        (
            "classifier_fourier",
            ClassifierRatio::new()
                .features(Features::Fourier)
                .n_fourier(6)
                .folds(2)
                .fit(sv, tv)
                .unwrap(),
        ),
        ("uniform", UniformRatio.fit(sv, tv).unwrap()),
    ];
    fits.into_iter()
        .map(|(n, m)| (n, m.to_json().unwrap()))
        .collect()
}

fn expect_model_file_error(text: &str, what: &str) -> String {
    match FittedRatio::from_json(text) {
        Err(Error::ModelFile(msg)) => msg,
        Err(other) => panic!("{what}: expected a model-file error, got {other:?}"),
        Ok(_) => panic!("{what}: a hostile document was accepted"),
    }
}

/// Applies `edit` to the parsed document and expects the loader to refuse the result with a
/// message containing `needle`.
fn edited(doc: &str, what: &str, needle: &str, edit: impl FnOnce(&mut Value)) {
    let mut v: Value = serde_json::from_str(doc).unwrap();
    edit(&mut v);
    let msg = expect_model_file_error(&v.to_string(), what);
    assert!(
        msg.contains(needle),
        "{what}: message {msg:?} does not mention {needle:?}"
    );
}

#[test]
fn valid_documents_round_trip() {
    let x = gaussian(7, &[0.2, -0.1], 1.0, 9);
    for (name, doc) in documents() {
        let m = FittedRatio::from_json(&doc).unwrap_or_else(|e| panic!("{name}: {e}"));
        assert_eq!(m.to_json().unwrap(), doc, "{name}");
        if name != "kmm" {
            assert!(m.ratio(x.view()).unwrap().iter().all(|w| w.is_finite()));
        }
    }
}

#[test]
fn truncated_documents_are_refused() {
    for (name, doc) in documents() {
        for cut in [0, 1, doc.len() / 3, doc.len() / 2, doc.len() - 1] {
            let msg = expect_model_file_error(&doc[..cut], name);
            assert!(msg.contains("truncated"), "{name} cut at {cut}: {msg}");
        }
    }
}

#[test]
fn wrong_format_and_version_are_refused() {
    for (name, doc) in documents() {
        for bad in [
            json!(3),
            json!(0),
            json!("1"),
            json!(1.5),
            json!(-1),
            Value::Null,
        ] {
            edited(&doc, name, "version", |v| v["version"] = bad.clone());
        }
        edited(&doc, name, "version", |v| {
            v.as_object_mut().unwrap().remove("version");
        });
        edited(&doc, name, "format", |v| {
            v["format"] = json!("shiftweight.other")
        });
        edited(&doc, name, "format", |v| {
            v.as_object_mut().unwrap().remove("format");
        });
        edited(&doc, name, "model", |v| {
            v.as_object_mut().unwrap().remove("model");
        });
    }
}

#[test]
fn hand_edited_documents_are_refused() {
    let docs = documents();
    for (name, doc) in &docs {
        edited(doc, name, "source weights", |v| {
            v["model"]["source_weights"].as_array_mut().unwrap().pop();
        });
        edited(doc, name, "source weights", |v| {
            v["model"]["source_weights"][0] = json!(-1.0);
        });
        edited(doc, name, "features", |v| {
            v["model"]["meta"]["n_features"] = json!(3);
        });
        edited(doc, name, "standardizer", |v| {
            v["model"]["standardizer"]["scale"][0] = json!(-2.0);
        });
        edited(doc, name, "standardizer", |v| {
            v["model"]["standardizer"]["mean"]
                .as_array_mut()
                .unwrap()
                .pop();
        });
        // A huge declared row count must be refused before anything is allocated for it.
        edited(doc, name, "source weights", |v| {
            v["model"]["meta"]["n_source"] = json!(u64::MAX);
        });
        // NaN is not JSON; a number beyond f64 range is refused by the parser.
        edited(doc, name, "malformed", |v| {
            v["model"]["source_weights"][0] = json!("NaN");
        });
        let text = doc.replacen("\"source_weights\":[", "\"source_weights\":[1e999,", 1);
        expect_model_file_error(&text, name);
        let text = doc.replacen("\"source_weights\":[", "\"source_weights\":[NaN,", 1);
        expect_model_file_error(&text, name);
    }
    let kernel = |n: &str| docs.iter().find(|(k, _)| *k == n).unwrap().1.clone();
    for name in ["least_squares", "kliep"] {
        let doc = kernel(name);
        edited(&doc, name, "kernel width", |v| {
            v["model"]["form"]["sigma"] = json!(-1.0)
        });
        edited(&doc, name, "kernel width", |v| {
            v["model"]["form"]["sigma"] = json!(0.0)
        });
        edited(&doc, name, "coefficients", |v| {
            v["model"]["form"]["coef"].as_array_mut().unwrap().pop();
        });
        edited(&doc, name, "centres", |v| {
            v["model"]["form"]["centres"]["rows"] = json!(u64::MAX)
        });
        edited(&doc, name, "centres", |v| {
            v["model"]["form"]["centres"]["cols"] = json!(1u64 << 40)
        });
        edited(&doc, name, "centres", |v| {
            v["model"]["form"]["centres"]["data"]
                .as_array_mut()
                .unwrap()
                .pop();
        });
        // The kind must match the form: a least-squares model cannot be a classifier.
        edited(&doc, name, "kind", |v| {
            v["model"]["kind"] = json!("classifier")
        });
    }
    let doc = kernel("classifier");
    edited(&doc, "classifier", "coefficients", |v| {
        v["model"]["form"]["coef"]
            .as_array_mut()
            .unwrap()
            .push(json!(1.0));
    });
    edited(&doc, "classifier", "kind", |v| {
        v["model"]["kind"] = json!("kliep")
    });
    let doc = kernel("classifier_fourier");
    edited(&doc, "classifier_fourier", "frequencies", |v| {
        v["model"]["form"]["map"]["frequencies"]["rows"] = json!(1u64 << 62)
    });
    edited(&doc, "classifier_fourier", "Fourier", |v| {
        v["model"]["form"]["map"]["offsets"]
            .as_array_mut()
            .unwrap()
            .pop();
    });
    edited(&doc, "classifier_fourier", "Fourier", |v| {
        v["model"]["form"]["map"]["sigma"] = json!(-3.0)
    });
    edited(&kernel("kmm"), "kmm", "kind", |v| {
        v["model"]["kind"] = json!("least_squares")
    });
}

/// Seeded random mutations of valid documents (byte flips, deletions, duplications, splices):
/// the loader either refuses with `Error::ModelFile` or returns a model that scores finite,
/// non-negative weights. Never a panic, never another error.
#[test]
fn random_mutations_give_only_model_file_errors() {
    use rand::Rng;
    let docs = documents();
    let x = gaussian(5, &[0.0, 0.3], 1.0, 11);
    let mut r = rng(0x6d75_7461_7465);
    let mut refused = 0usize;
    let trials = 400;
    for trial in 0..trials {
        let (name, doc) = &docs[trial % docs.len()];
        let mut bytes = doc.clone().into_bytes();
        for _ in 0..r.random_range(1..4) {
            let i = r.random_range(0..bytes.len());
            match r.random_range(0..4) {
                0 => bytes[i] ^= 1 << r.random_range(0..8),
                1 => {
                    bytes.remove(i);
                }
                2 => {
                    let j = (i + r.random_range(1..40)).min(bytes.len());
                    let piece = bytes[i..j].to_vec();
                    bytes.splice(i..i, piece);
                }
                _ => bytes[i] = b"{}[],:\"0-e.9"[r.random_range(0..12)],
            }
        }
        let text = String::from_utf8_lossy(&bytes);
        match FittedRatio::from_json(&text) {
            Err(Error::ModelFile(_)) => refused += 1,
            Err(other) => panic!("{name} trial {trial}: non-model-file error {other:?}"),
            Ok(m) => {
                if let Ok(w) = m.ratio(x.view()) {
                    assert!(
                        w.iter().all(|v| v.is_finite() && *v >= 0.0),
                        "{name} trial {trial}: accepted mutant scores {w:?}"
                    );
                }
                assert!(m.source_weights.iter().all(|v| v.is_finite() && *v >= 0.0));
            }
        }
    }
    // Most mutations break the document; a flip inside a digit can leave a valid one.
    assert!(refused > trials / 2, "only {refused} of {trials} refused");
}
