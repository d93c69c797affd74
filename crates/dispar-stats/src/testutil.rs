//! Tolerance helpers shared by the unit tests (tolerances live beside each table of cases,
//! named and justified there).

/// Asserts |got - want| <= rel * |want| (or <= rel when want is 0).
#[track_caller]
pub(crate) fn assert_rel(got: f64, want: f64, rel: f64, what: &str) {
    let scale = if want == 0.0 { 1.0 } else { want.abs() };
    assert!(
        (got - want).abs() <= rel * scale,
        "{what}: got {got:e}, want {want:e} (relative error {:e} > {rel:e})",
        (got - want).abs() / scale
    );
}
