//! Tests of `inspect`.

use super::*;

#[test]
fn weights_are_parsed_and_bad_ones_refused() {
    assert_eq!(WeightsRule::parse("queen").unwrap(), WeightsRule::Queen);
    assert_eq!(
        WeightsRule::parse("knn:8").unwrap(),
        WeightsRule::Nearest(8)
    );
    assert_eq!(
        WeightsRule::parse("band:2500").unwrap(),
        WeightsRule::Band(2500.0)
    );
    assert_eq!(WeightsRule::parse("band:2500").unwrap().name(), "band:2500");
    for bad in ["knn:0", "knn:x", "band:-1", "band:nan", "tower"] {
        assert_eq!(
            WeightsRule::parse(bad).unwrap_err().exit_code(),
            crate::error::exit::USAGE
        );
    }
}
