//! Unit tests of the drag formulas against published tables, a high-precision evaluation of
//! Brenner's series, the method-of-reflections limits and the sheet of hydrodynamic frequencies.

use super::*;
use crate::water::{water_density_kg_per_m3, water_viscosity_pa_s};

/// Asserts that `actual` is within `relative_tolerance` of `expected`.
#[track_caller]
fn check_relative(actual: f64, expected: f64, relative_tolerance: f64) {
    let relative_error = ((actual - expected) / expected).abs();
    assert!(
        relative_error <= relative_tolerance,
        "got {actual:e}, expected {expected:e}: relative error {relative_error:e} exceeds {relative_tolerance:e}"
    );
}

/// A wall-correction formula taking (radius_m, height_m).
type WallFormula = fn(f64, f64) -> Result<f64, DragError>;

/// Unwraps a drag result in a test, failing with the error message.
#[track_caller]
fn ok(result: Result<f64, DragError>) -> f64 {
    result.unwrap_or_else(|error| panic!("unexpected drag error: {error}"))
}

/// Checks a wall factor at h/R against a four-decimal table value (half a unit: 5e-5).
#[track_caller]
fn check_table(factor: WallFormula, height_over_radius: f64, expected: f64) {
    // A radius of 1 um; the factors depend on h/R only.
    let radius_m = 1e-6;
    let actual = ok(factor(radius_m, height_over_radius * radius_m));
    assert!(
        (actual - expected).abs() <= 5e-5,
        "at h/R = {height_over_radius}: got {actual}, expected {expected}"
    );
}

#[test]
fn stokes_drag_of_a_1_um_bead_in_water_at_25_celsius_is_8_39e_minus_9_kg_per_s() {
    // Stokes' law gamma0 = 6 pi eta R (Happel & Brenner) with eta = 0.8900 mPa s (IAPWS 2008 at
    // 25 °C, Huber et al. 2009) and R = 0.5 um gives 8.388e-9 kg/s = 8.39e-6 pN s/nm
    // (three figures).
    check_relative(stokes_drag_kg_per_s(0.8900e-3, 0.5e-6), 8.39e-9, 1e-3);
}

#[test]
fn stokes_drag_is_linear_in_viscosity_and_radius() {
    // Stokes' law is bilinear in eta and R (Happel & Brenner).
    let base = stokes_drag_kg_per_s(1e-3, 1e-6);
    check_relative(stokes_drag_kg_per_s(2e-3, 1e-6), 2.0 * base, 1e-15);
    check_relative(stokes_drag_kg_per_s(1e-3, 3e-6), 3.0 * base, 1e-15);
}

#[test]
fn faxen_factor_matches_the_tabulated_values() {
    // Faxen's formula (Faxen 1923; Happel & Brenner) at h/R = 1.5, 2, 3, 5, 10, to four decimals.
    check_table(faxen_lateral_factor, 1.5, 1.6153);
    check_table(faxen_lateral_factor, 2.0, 1.3861);
    check_table(faxen_lateral_factor, 3.0, 1.2274);
    check_table(faxen_lateral_factor, 5.0, 1.1259);
    check_table(faxen_lateral_factor, 10.0, 1.0595);
}

#[test]
fn brenner_factor_matches_the_tabulated_values() {
    // Brenner's series (Chem. Eng. Sci. 16, 242 (1961)) at h/R = 1.5, 2, 3, 5, 10, to four
    // decimals.
    check_table(brenner_axial_factor, 1.5, 3.2054);
    check_table(brenner_axial_factor, 2.0, 2.1255);
    check_table(brenner_axial_factor, 3.0, 1.5692);
    check_table(brenner_axial_factor, 5.0, 1.2851);
    check_table(brenner_axial_factor, 10.0, 1.1262);
}

#[test]
fn brenner_factor_matches_a_60_digit_evaluation_from_near_contact_to_far_field() {
    // tests/data/drag/brenner_axial.csv: Brenner's series summed literally in 60-digit
    // arithmetic with mpmath 1.3.0 by make_brenner_fixture.py beside it, from h/R = 1 + 2e-6 to
    // 1e7. The double-precision sum is rearranged to avoid overflow; near contact it loses a few
    // digits to cancellation in the denominator, so the tolerance grows from 1e-14 to 5e-10.
    let fixture = include_str!("../../tests/data/drag/brenner_axial.csv");
    let mut n_rows = 0_usize;
    for (line_idx, line) in fixture.lines().enumerate().skip(1) {
        let fields: Vec<&str> = line.split(',').collect();
        let parse = |field_idx: usize| -> f64 {
            fields
                .get(field_idx)
                .and_then(|text| text.trim().parse::<f64>().ok())
                .unwrap_or_else(|| {
                    panic!(
                        "brenner_axial.csv line {}: bad field {field_idx}",
                        line_idx + 1
                    )
                })
        };
        let (height_over_radius, expected) = (parse(0), parse(1));
        // Cancellation in 4 sinh^2(3 alpha / 2) - 9 sinh^2(alpha) costs a factor of about
        // 12 / (9 alpha^2) = 2 / (3 (h/R - 1)) in relative precision near contact.
        let tolerance = 1e-15_f64.mul_add((height_over_radius - 1.0).recip(), 1e-14);
        check_relative(
            ok(brenner_axial_factor(1.0, height_over_radius)),
            expected,
            tolerance,
        );
        n_rows += 1;
    }
    assert_eq!(
        n_rows, 16,
        "brenner_axial.csv should hold 16 reference points"
    );
}

#[test]
fn schaffer_approximation_is_within_0_1_percent_of_brenner_from_h_over_r_1_1() {
    // Schaffer, Norrelykke & Howard, Langmuir 23, 3654 (2007): within 0.1% of Brenner's exact
    // result for h/R >= 1.1. Checked on a geometric grid from 1.1 to 1000.
    let mut height_over_radius = 1.1_f64;
    while height_over_radius <= 1000.0 {
        let exact = ok(brenner_axial_factor(1.0, height_over_radius));
        check_relative(
            ok(schaffer_axial_factor(1.0, height_over_radius)),
            exact,
            1e-3,
        );
        height_over_radius *= 1.01;
    }
}

#[test]
fn schaffer_approximation_is_within_0_35_percent_of_brenner_down_to_h_over_r_1_02() {
    // Schaffer, Norrelykke & Howard (2007): within 0.35% of Brenner between h/R = 1.02 and 1.1.
    for step in 0..=80 {
        let height_over_radius = 0.001_f64.mul_add(f64::from(step), 1.02);
        let exact = ok(brenner_axial_factor(1.0, height_over_radius));
        check_relative(
            ok(schaffer_axial_factor(1.0, height_over_radius)),
            exact,
            3.5e-3,
        );
    }
}

/// Checks that (factor - 1) / (R/h) approaches `leading` far from the wall, with an error no
/// larger than twice R/h plus rounding (the next-order coefficient is (9/8)^2 or (9/16)^2,
/// both below 2).
#[track_caller]
fn check_far_field(factor: WallFormula, leading: f64) {
    for height_over_radius in [1e2_f64, 1e3, 1e4, 1e5, 1e6, 1e8] {
        let radius_over_height = height_over_radius.recip();
        let slope = (ok(factor(1.0, height_over_radius)) - 1.0) / radius_over_height;
        // Rounding of a factor near 1 is about one ulp, amplified by the division by R/h.
        let rounding = 2.0 * f64::EPSILON / radius_over_height;
        assert!(
            (slope - leading).abs() <= 2.0_f64.mul_add(radius_over_height, rounding),
            "at h/R = {height_over_radius}: (factor - 1) h/R = {slope}, expected {leading}"
        );
    }
}

#[test]
fn brenner_factor_tends_to_the_lorentz_reflection_limit_far_from_the_wall() {
    // Method of reflections (Lorentz 1907, year from memory, unverified; Happel & Brenner):
    // gamma_perp/gamma0 = 1 + (9/8) R/h + O((R/h)^2).
    check_far_field(brenner_axial_factor, 9.0 / 8.0);
}

#[test]
fn faxen_factor_tends_to_its_leading_reflection_term_far_from_the_wall() {
    // Method of reflections (Faxen 1923; Happel & Brenner): gamma_par/gamma0 = 1 + (9/16) R/h
    // + O((R/h)^2).
    check_far_field(faxen_lateral_factor, 9.0 / 16.0);
}

#[test]
fn brenner_factor_tends_to_the_lubrication_limit_near_contact() {
    // Lubrication theory (Cox & Brenner, Chem. Eng. Sci. 22, 1753 (1967); from memory,
    // unverified beyond the leading term): gamma_perp/gamma0 -> R/gap as the gap closes; the
    // correction is O(ln(R/gap)), so the ratio is within 0.01% at gap/R = 2e-6.
    let gap_over_radius = 2e-6;
    let factor = ok(brenner_axial_factor(1.0, 1.0 + gap_over_radius));
    check_relative(factor * gap_over_radius, 1.0, 1e-4);
}

#[test]
fn wall_factors_grow_monotonically_towards_the_surface() {
    // Physical expectation (Happel & Brenner): drag increases as the gap closes, and the
    // perpendicular correction exceeds the parallel one at every height.
    let mut previous = (1.0, 1.0);
    let mut height_over_radius = 100.0_f64;
    while height_over_radius > 1.02 {
        let lateral = ok(faxen_lateral_factor(1.0, height_over_radius));
        let axial = ok(brenner_axial_factor(1.0, height_over_radius));
        assert!(
            lateral > previous.0 && axial > previous.1,
            "not monotone at h/R = {height_over_radius}"
        );
        assert!(
            axial > lateral,
            "axial below lateral at h/R = {height_over_radius}"
        );
        previous = (lateral, axial);
        height_over_radius = (height_over_radius - 1.0).mul_add(0.9, 1.0);
    }
}

#[test]
fn wall_factor_dispatches_by_orientation_and_is_one_without_a_surface() {
    let (radius_m, height_m) = (0.5e-6, 1.0e-6);
    assert_eq!(
        ok(wall_factor(
            AxisOrientation::Lateral,
            radius_m,
            Some(height_m)
        ))
        .to_bits(),
        ok(faxen_lateral_factor(radius_m, height_m)).to_bits()
    );
    assert_eq!(
        ok(wall_factor(
            AxisOrientation::Axial,
            radius_m,
            Some(height_m)
        ))
        .to_bits(),
        ok(brenner_axial_factor(radius_m, height_m)).to_bits()
    );
    for orientation in [AxisOrientation::Lateral, AxisOrientation::Axial] {
        assert_eq!(
            ok(wall_factor(orientation, radius_m, None)).to_bits(),
            1.0_f64.to_bits()
        );
    }
}

#[test]
fn faxen_is_trusted_from_h_over_r_1_5_where_its_last_term_is_below_1_4_percent() {
    // Truncation-error estimate by the last retained term (common practice): at h/R = 1.5 the
    // term (1/16)(R/h)^5 is 1.33% of Faxen's denominator.
    let x: f64 = 1.0 / 1.5;
    let last_term_fraction = x.powi(5) / 16.0 * ok(faxen_lateral_factor(1.0, 1.5));
    assert!(
        last_term_fraction < 0.014,
        "last term fraction {last_term_fraction}"
    );
    assert!(faxen_valid(1e-6, 1.5e-6));
    assert!(faxen_valid(1e-6, 10e-6));
    assert!(!faxen_valid(1e-6, 1.49e-6));
    assert!(!faxen_valid(1e-6, 1.1e-6));
    assert!(!faxen_valid(1e-6, 0.5e-6));
    assert!(!faxen_valid(f64::NAN, 1.5e-6));
    assert!(!faxen_valid(1e-6, f64::INFINITY));
}

/// Checks f_nu and f_m for a polystyrene bead of diameter `diameter_m` in water at 25 °C.
#[track_caller]
fn check_hydro(diameter_m: f64, expected_f_nu_hz: f64, expected_f_m_hz: f64) {
    let viscosity_pa_s = water_viscosity_pa_s(25.0).unwrap_or_else(|error| panic!("{error}"));
    let density_kg_per_m3 = water_density_kg_per_m3(25.0).unwrap_or_else(|error| panic!("{error}"));
    let frequencies = hydrodynamic_frequencies(
        viscosity_pa_s,
        density_kg_per_m3,
        POLYSTYRENE_DENSITY_KG_PER_M3,
        0.5 * diameter_m,
    );
    check_relative(frequencies.f_nu_hz, expected_f_nu_hz, 1e-2);
    check_relative(frequencies.f_m_hz, expected_f_m_hz, 1e-2);
}

#[test]
fn hydrodynamic_frequencies_of_polystyrene_beads_in_water_match_the_published_scale() {
    // f_nu = nu/(pi R^2) and f_m = gamma0/(2 pi m*) of Berg-Sorensen & Flyvbjerg, Rev. Sci.
    // Instrum. 75, 594 (2004), for polystyrene (1.05 g/cm3) in water at 25 °C:
    // 1.14 MHz / 1.65 MHz for a 1 um bead, 284 kHz / 412 kHz for a 2 um bead (three figures).
    check_hydro(1e-6, 1.14e6, 1.65e6);
    check_hydro(2e-6, 284e3, 412e3);
}

#[test]
fn hydrodynamic_frequencies_scale_as_inverse_radius_squared() {
    // Both f_nu and f_m are proportional to 1/R^2 at fixed fluid and bead (from their
    // definitions in Berg-Sorensen & Flyvbjerg 2004).
    let small = hydrodynamic_frequencies(1e-3, 1000.0, 1050.0, 0.5e-6);
    let large = hydrodynamic_frequencies(1e-3, 1000.0, 1050.0, 1.5e-6);
    check_relative(small.f_nu_hz / large.f_nu_hz, 9.0, 1e-14);
    check_relative(small.f_m_hz / large.f_m_hz, 9.0, 1e-14);
}

/// Checks that all three wall formulas refuse a geometry with the given error.
#[track_caller]
fn check_refused(radius_m: f64, height_m: f64, expected: &DragError) {
    let formulas: [(&str, WallFormula); 3] = [
        ("faxen", faxen_lateral_factor),
        ("brenner", brenner_axial_factor),
        ("schaffer", schaffer_axial_factor),
    ];
    for (name, formula) in formulas {
        match formula(radius_m, height_m) {
            Err(error) => assert_eq!(
                format!("{error:?}"),
                format!("{expected:?}"),
                "{name} at R = {radius_m}, h = {height_m}"
            ),
            Ok(value) => {
                panic!("{name} at R = {radius_m}, h = {height_m} should fail, got {value}")
            }
        }
    }
}

#[test]
fn heights_not_above_the_radius_are_refused() {
    for (radius_m, height_m) in [(1e-6, 1e-6), (1e-6, 0.5e-6), (1e-6, 0.999_999e-6)] {
        check_refused(
            radius_m,
            height_m,
            &DragError::HeightNotAboveRadius { height_m, radius_m },
        );
    }
}

#[test]
fn non_positive_or_non_finite_radii_are_refused() {
    for radius_m in [-1e-6, 0.0, f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
        check_refused(radius_m, 2e-6, &DragError::InvalidRadius { radius_m });
        match wall_factor(AxisOrientation::Lateral, radius_m, None) {
            Err(DragError::InvalidRadius { .. }) => {}
            other => panic!("wall_factor with radius {radius_m} and no surface gave {other:?}"),
        }
    }
}

#[test]
fn non_positive_or_non_finite_heights_are_refused() {
    for height_m in [-2e-6, 0.0, f64::NAN, f64::INFINITY] {
        check_refused(1e-6, height_m, &DragError::InvalidHeight { height_m });
    }
}

#[test]
fn brenner_refuses_gaps_below_a_millionth_of_the_radius() {
    let (radius_m, height_m) = (1.0, 1.0 + 1e-7);
    match brenner_axial_factor(radius_m, height_m) {
        Err(DragError::GapTooSmall {
            min_gap_over_radius,
            ..
        }) => {
            assert_eq!(min_gap_over_radius.to_bits(), 1e-6_f64.to_bits());
        }
        other => panic!("expected GapTooSmall, got {other:?}"),
    }
    // Faxen and Schaffer are closed forms and stay finite there.
    assert!(ok(faxen_lateral_factor(radius_m, height_m)).is_finite());
    assert!(ok(schaffer_axial_factor(radius_m, height_m)).is_finite());
}

#[test]
fn extreme_but_valid_geometries_give_finite_factors() {
    // No overflow or NaN for tiny and huge lengths, or the smallest representable gap.
    for (radius_m, height_m) in [
        (f64::MIN_POSITIVE, f64::MAX),
        (1e-300, 1e300),
        (1e300, f64::MAX),
        (1.0, 1.0 + f64::EPSILON),
    ] {
        for (name, value) in [
            ("faxen", faxen_lateral_factor(radius_m, height_m)),
            ("schaffer", schaffer_axial_factor(radius_m, height_m)),
            ("brenner", brenner_axial_factor(radius_m, height_m)),
        ] {
            match value {
                Ok(factor) => assert!(factor.is_finite() && factor >= 1.0, "{name}: {factor}"),
                Err(DragError::GapTooSmall { .. }) if name == "brenner" => {}
                Err(error) => panic!("{name} at R = {radius_m}, h = {height_m}: {error}"),
            }
        }
    }
}

#[test]
fn error_messages_name_the_value_and_the_constraint() {
    let message = DragError::HeightNotAboveRadius {
        height_m: 4e-7,
        radius_m: 5e-7,
    }
    .to_string();
    for needle in ["4e-7", "5e-7", "height_m", "radius_m", "centre"] {
        assert!(message.contains(needle), "{message:?} lacks {needle:?}");
    }
    let message = DragError::InvalidRadius { radius_m: -1.0 }.to_string();
    for needle in ["-1", "radius_m", "positive"] {
        assert!(message.contains(needle), "{message:?} lacks {needle:?}");
    }
}
