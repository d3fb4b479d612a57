//! Options of fold schemes and models: a map from long option names (as on the
//! command line, without `--`, and as keys of a job file) to values. Each
//! scheme or model parses the options it takes into its own typed parameters,
//! so adding one needs no change to the pipeline or the stores.

use serde::de::DeserializeOwned;
use serde::Deserialize;

use crate::error::Error;

/// Option name → value, e.g. `block-size` → `4000`.
pub type Options = serde_json::Map<String, serde_json::Value>;

/// Parses `options` into `T` (whose fields are the kebab-case option names),
/// refusing any option not in `accepted`.
///
/// # Errors
/// [`Error::Usage`] naming the option that does not apply to `owner` (e.g.
/// `--scheme random`) or whose value does not fit.
pub fn parse_options<T: DeserializeOwned>(
    owner: &str,
    accepted: &[&str],
    options: &Options,
) -> Result<T, Error> {
    for key in options.keys() {
        if !accepted.contains(&key.as_str()) {
            let takes = if accepted.is_empty() {
                "it takes no options of its own".to_string()
            } else {
                let names: Vec<String> = accepted.iter().map(|a| format!("--{a}")).collect();
                format!("it takes {}", names.join(", "))
            };
            return Err(Error::Usage(format!(
                "--{key} does not apply to {owner}; {takes}"
            )));
        }
    }
    // serde_path_to_error names the option whose value did not fit.
    serde_path_to_error::deserialize(serde_json::Value::Object(options.clone())).map_err(|error| {
        let path = error.path().to_string();
        let inner = error.into_inner();
        if path.is_empty() || path == "." {
            Error::Usage(format!("{owner}: {inner}"))
        } else {
            Error::Usage(format!("--{path} ({owner}): {inner}"))
        }
    })
}

/// Deserialises a pair of numbers given as `"X,Y"` (the command line's form;
/// spaces allowed) or as a two-element array (a job file's form).
///
/// # Errors
/// A serde error naming what was expected.
pub fn pair<'de, D: serde::Deserializer<'de>>(deserializer: D) -> Result<[f64; 2], D::Error> {
    use serde::de::Error as _;
    #[derive(serde::Deserialize)]
    #[serde(untagged)]
    enum Pair {
        Text(String),
        Numbers([f64; 2]),
    }
    match Pair::deserialize(deserializer)? {
        Pair::Numbers(pair) => Ok(pair),
        Pair::Text(text) => {
            let parts: Vec<Option<f64>> = text
                .split(',')
                .map(|part| part.trim().parse::<f64>().ok())
                .collect();
            match parts.as_slice() {
                [Some(x), Some(y)] => Ok([*x, *y]),
                _ => Err(D::Error::custom(format!(
                    "expected X,Y (two numbers), got {text:?}"
                ))),
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Debug, serde::Deserialize, PartialEq)]
    #[serde(rename_all = "kebab-case")]
    struct Params {
        block_size: f64,
        #[serde(default)]
        folds: Option<u32>,
    }

    #[test]
    fn options_parse_and_unknown_ones_are_named() {
        let mut options = Options::new();
        options.insert("block-size".into(), 4000.into());
        let params: Params =
            parse_options("--scheme grid", &["block-size", "folds"], &options).unwrap();
        assert_eq!(params.block_size, 4000.0);
        options.insert("clusters".into(), 4.into());
        let error = parse_options::<Params>("--scheme grid", &["block-size", "folds"], &options)
            .unwrap_err();
        assert_eq!(
            error.to_string(),
            "usage: --clusters does not apply to --scheme grid; it takes --block-size, --folds"
        );
    }
}
