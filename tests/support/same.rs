//! Bit-for-bit comparison of results, for the tests that check a faster or
//! shared path against the plain one (sharing, the many-layer pass).

use baroc::grid::Field;
use baroc::lang::value::Value;

/// Same shape, the same bits at every point (NaN included), and the same
/// name, units, long name and attributes.
pub fn same_bits(a: &Field, b: &Field) -> bool {
    a.data.shape() == b.data.shape()
        && a.data.iter().zip(b.data.iter()).all(|(x, y)| x.to_bits() == y.to_bits())
        && a.name == b.name
        && a.units == b.units
        && a.long_name == b.long_name
        && a.attributes == b.attributes
}

/// `same_bits` for scalar fields, both components of vectors, and every
/// row of series.
pub fn same_value(a: &Value, b: &Value) -> bool {
    match (a, b) {
        (Value::Scalar(x), Value::Scalar(y)) => same_bits(x, y),
        (Value::Vector(x), Value::Vector(y)) => same_bits(&x.eastward, &y.eastward) && same_bits(&x.northward, &y.northward),
        (Value::Series(x), Value::Series(y)) => {
            x.labels == y.labels && x.rows.len() == y.rows.len() && x.rows.iter().flatten().zip(y.rows.iter().flatten()).all(|(p, q)| p.to_bits() == q.to_bits())
        }
        _ => false,
    }
}
