//! The AAPM TG-71 monitor-unit formalism (Gibbons et al, Med Phys 2014;41:031501) for SSD and
//! isocentric (SAD) setups, with every factor kept so the calculation can be followed line by
//! line, and the field-size helpers it needs.
//!
//! SSD setup:  MU = D 100 / (D0' Sc(r_c) Sp(r_d0) PDD(d, r, SSD) WF TF OAR ((SSD0 + d0)/(SSD + d0))^2),
//!             PDD(d, r, SSD) = PDD(d, r, f1) F, with F the Mayneord factor from the SSD f1 at
//!             which the PDD table was measured (Khan, The Physics of Radiation Therapy)
//! SAD setup:  MU = D / (D0' Sc(r_c) Sp(r_d) TPR(d, r_d) WF TF OAR ((SSD0 + d0)/SPD)^2)
//!
//! D in cGy, D0' in cGy/MU at the normalisation depth d0 and SSD0; PDD in percent; field sizes
//! are equivalent square sides in cm (r_c at the isocentre, r at the surface, r_d0 and r_d
//! projected to the depths d0 and d).

/// One factor of the calculation.
#[derive(Debug, Clone, PartialEq)]
pub struct Factor {
    pub symbol: &'static str,
    pub description: String,
    pub value: f64,
}

/// The result: dose per MU and MU, with the factors used.
#[derive(Debug, Clone, PartialEq)]
pub struct MuResult {
    pub dose_per_mu_cgy: f64,
    pub mu: f64,
    pub factors: Vec<Factor>,
}

/// Factors of an SSD-setup calculation.
#[derive(Debug, Clone, PartialEq)]
pub struct SsdFactors {
    pub dose_cgy: f64,
    pub d0_prime_cgy_per_mu: f64,
    pub sc: f64,
    pub sp: f64,
    /// PDD (%) from the table, at the SSD it was measured at (`pdd_ssd_cm`).
    pub pdd_percent: f64,
    pub pdd_ssd_cm: f64,
    pub depth_cm: f64,
    pub wedge: f64,
    pub tray: f64,
    pub oar: f64,
    pub ssd0_cm: f64,
    pub d0_cm: f64,
    pub ssd_cm: f64,
}

/// Factors of an isocentric (SAD) calculation.
#[derive(Debug, Clone, PartialEq)]
pub struct SadFactors {
    pub dose_cgy: f64,
    pub d0_prime_cgy_per_mu: f64,
    pub sc: f64,
    pub sp: f64,
    pub tpr: f64,
    pub wedge: f64,
    pub tray: f64,
    pub oar: f64,
    pub ssd0_cm: f64,
    pub d0_cm: f64,
    /// Source to calculation-point distance.
    pub spd_cm: f64,
}

fn factor(symbol: &'static str, description: impl Into<String>, value: f64) -> Factor {
    Factor {
        symbol,
        description: description.into(),
        value,
    }
}

/// TG-71 SSD setup.
pub fn mu_ssd(f: &SsdFactors) -> MuResult {
    let isf = ((f.ssd0_cm + f.d0_cm) / (f.ssd_cm + f.d0_cm)).powi(2);
    // The PDD is normalised at d0, so d0 plays the depth of maximum in Mayneord's factor.
    let mayneord_f = mayneord(f.pdd_ssd_cm, f.ssd_cm, f.d0_cm, f.depth_cm);
    let dose_per_mu = f.d0_prime_cgy_per_mu
        * f.sc
        * f.sp
        * (f.pdd_percent * mayneord_f / 100.0)
        * f.wedge
        * f.tray
        * f.oar
        * isf;
    MuResult {
        dose_per_mu_cgy: dose_per_mu,
        mu: f.dose_cgy / dose_per_mu,
        factors: vec![
            factor("D", "dose at the point (cGy)", f.dose_cgy),
            factor(
                "D0'",
                "dose per MU at the normalisation point (cGy/MU)",
                f.d0_prime_cgy_per_mu,
            ),
            factor("Sc", "collimator scatter at the collimator field", f.sc),
            factor("Sp", "phantom scatter at the field projected to d0", f.sp),
            factor(
                "PDD",
                format!("percentage depth dose (%) at SSD {} cm", f.pdd_ssd_cm),
                f.pdd_percent,
            ),
            factor(
                "F",
                format!(
                    "Mayneord factor from SSD {} to {} cm, ((SSD + d0)/(f1 + d0))^2 ((f1 + d)/(SSD + d))^2",
                    f.pdd_ssd_cm, f.ssd_cm
                ),
                mayneord_f,
            ),
            factor("WF", "wedge factor", f.wedge),
            factor("TF", "tray factor", f.tray),
            factor("OAR", "off-axis ratio", f.oar),
            factor("ISF", "((SSD0 + d0)/(SSD + d0))^2", isf),
        ],
    }
}

/// TG-71 isocentric (SAD) setup.
pub fn mu_sad(f: &SadFactors) -> MuResult {
    let isf = ((f.ssd0_cm + f.d0_cm) / f.spd_cm).powi(2);
    let dose_per_mu = f.d0_prime_cgy_per_mu * f.sc * f.sp * f.tpr * f.wedge * f.tray * f.oar * isf;
    MuResult {
        dose_per_mu_cgy: dose_per_mu,
        mu: f.dose_cgy / dose_per_mu,
        factors: vec![
            factor("D", "dose at the point (cGy)", f.dose_cgy),
            factor(
                "D0'",
                "dose per MU at the normalisation point (cGy/MU)",
                f.d0_prime_cgy_per_mu,
            ),
            factor("Sc", "collimator scatter at the collimator field", f.sc),
            factor("Sp", "phantom scatter at the field at the point", f.sp),
            factor("TPR", "tissue-phantom ratio at the point", f.tpr),
            factor("WF", "wedge factor", f.wedge),
            factor("TF", "tray factor", f.tray),
            factor("OAR", "off-axis ratio", f.oar),
            factor("ISF", "((SSD0 + d0)/SPD)^2", isf),
        ],
    }
}

/// Equivalent square of an a x b rectangle by area over perimeter (Sterling, Perry & Katz
/// 1964): side = 4 A / P = 2 a b / (a + b).
pub fn equivalent_square(a: f64, b: f64) -> f64 {
    2.0 * a * b / (a + b)
}

/// Side of the square with the area of a circle of radius `r` (equal-area equivalence).
pub fn square_of_circle(r: f64) -> f64 {
    r * std::f64::consts::PI.sqrt()
}

/// Mayneord F factor converting a PDD from SSD f1 to f2 (scatter change ignored):
/// F = ((f2 + dm)/(f1 + dm))^2 ((f1 + d)/(f2 + d))^2.
pub fn mayneord(f1_cm: f64, f2_cm: f64, dmax_cm: f64, depth_cm: f64) -> f64 {
    ((f2_cm + dmax_cm) / (f1_cm + dmax_cm)).powi(2)
        * ((f1_cm + depth_cm) / (f2_cm + depth_cm)).powi(2)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// An SSD-setup case with unit output, scatter and modifiers: D0' 1 cGy/MU at d0 1.5 cm
    /// and SSD0 100 cm, 10 cm deep.
    fn ssd_case(dose_cgy: f64, pdd_percent: f64, pdd_ssd_cm: f64, ssd_cm: f64) -> SsdFactors {
        SsdFactors {
            dose_cgy,
            d0_prime_cgy_per_mu: 1.0,
            sc: 1.0,
            sp: 1.0,
            pdd_percent,
            pdd_ssd_cm,
            depth_cm: 10.0,
            wedge: 1.0,
            tray: 1.0,
            oar: 1.0,
            ssd0_cm: 100.0,
            d0_cm: 1.5,
            ssd_cm,
        }
    }

    #[test]
    fn sad_worked_example_m1() {
        // Hand calculation from the TG-71 SAD formula (Gibbons et al 2014) with round
        // illustrative inputs (not an example of the report): 200 cGy, 6 MV, 10 cm deep at the isocentre (SPD 100 cm), 12 x 12 cm,
        // D0' = 1.000 cGy/MU at d_max 1.5 cm and SSD0 100 cm, Sc 1.010, Sp 1.008, TMR 0.800,
        // ISF (101.5/100)^2 = 1.030225 -> 238.36 MU.
        let r = mu_sad(&SadFactors {
            dose_cgy: 200.0,
            d0_prime_cgy_per_mu: 1.0,
            sc: 1.010,
            sp: 1.008,
            tpr: 0.800,
            wedge: 1.0,
            tray: 1.0,
            oar: 1.0,
            ssd0_cm: 100.0,
            d0_cm: 1.5,
            spd_cm: 100.0,
        });
        assert!((r.mu - 238.36).abs() < 0.005, "{}", r.mu);
        let isf = r
            .factors
            .iter()
            .find(|f| f.symbol == "ISF")
            .expect("isf")
            .value;
        assert!((isf - 1.030225).abs() < 1e-12);
    }

    #[test]
    fn ssd_worked_example_m2() {
        // Hand calculation from the TG-71 SSD formula (Gibbons et al 2014), illustrative inputs:
        // 200 cGy at 10 cm, SSD 100 cm, 10 x 10 cm, Sc = Sp = 1, PDD 66.5 % -> 300.75 MU
        // (D0' 1 cGy/MU at d_max 1.5 cm, ISF 1, PDD measured at the treatment SSD: F = 1).
        let r = mu_ssd(&ssd_case(200.0, 66.5, 100.0, 100.0));
        assert!((r.mu - 300.75).abs() < 0.005, "{}", r.mu);
    }

    #[test]
    fn mayneord_example_m3() {
        // Mayneord F factor (Khan, The Physics of Radiation Therapy, the chapter on dose
        // distribution and scatter analysis), evaluated by hand: SSD 100 -> 110 cm, d_max
        // 1.5 cm, depth 10 cm: F = (111.5/101.5)^2 (110/120)^2 = 1.014006, PDD 66.5 -> 67.43 %;
        // the output's inverse square to d0 at SSD 110 (TG-71): (101.5/111.5)^2 = 0.828671.
        let f = mayneord(100.0, 110.0, 1.5, 10.0);
        assert!((f - 1.014006).abs() < 5e-7, "{f}");
        assert!((66.5 * f - 67.43).abs() < 0.005);
        let r = mu_ssd(&ssd_case(100.0, 100.0, 110.0, 110.0));
        assert!((r.dose_per_mu_cgy - 0.828671).abs() < 5e-7);
    }

    #[test]
    fn a_pdd_measured_at_100_cm_is_converted_to_the_treatment_ssd() {
        // Hand calculations from the TG-71 SSD formula (Gibbons et al 2014) with the PDD taken
        // to the treatment SSD by Mayneord's F (Khan, The Physics of Radiation Therapy),
        // illustrative inputs: 200 cGy at 10 cm, 10 x 10 cm, Sc = Sp = 1, D0' 1 cGy/MU at
        // d0 = 1.5 cm and SSD0 100 cm, PDD 66.5 % measured at SSD 100 cm.
        //   SSD 110: F = 1.014006, ISF = (101.5/111.5)^2 = 0.828671,
        //            D/MU = 0.665 x 1.014006 x 0.828671 = 0.558785 -> 357.92 MU
        //            (362.93 MU with the table read unchanged: 1.4 % too many).
        //   SSD 90:  F = (91.5/101.5)^2 (110/100)^2 = 0.983321, ISF = (101.5/91.5)^2 = 1.230523,
        //            D/MU = 0.804650 -> 248.56 MU (244.41 unchanged).
        for (ssd, mu, f) in [(110.0, 357.92, 1.014006), (90.0, 248.555, 0.983321)] {
            let r = mu_ssd(&ssd_case(200.0, 66.5, 100.0, ssd));
            assert!((r.mu - mu).abs() < 0.005, "SSD {ssd}: {}", r.mu);
            let shown = r.factors.iter().find(|x| x.symbol == "F").expect("F shown");
            assert!((shown.value - f).abs() < 5e-7, "{}", shown.value);
        }
    }

    #[test]
    fn equivalent_squares_by_area_over_perimeter() {
        // Sterling, Perry & Katz 1964 (side = 4 A / P), evaluated by hand: 5 x 20 -> 8.0, 10 x 20 ->
        // 13.333, 4 x 16 -> 6.4, 6 x 12 -> 8.0 cm; circle of radius 5 -> 8.862 cm.
        assert!((equivalent_square(5.0, 20.0) - 8.0).abs() < 1e-12);
        assert!((equivalent_square(10.0, 20.0) - 13.3333).abs() < 1e-4);
        assert!((equivalent_square(4.0, 16.0) - 6.4).abs() < 1e-12);
        assert!((equivalent_square(6.0, 12.0) - 8.0).abs() < 1e-12);
        assert!((square_of_circle(5.0) - 8.862).abs() < 5e-4);
    }
}
