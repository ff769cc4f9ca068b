//! From beam data and a beam's geometry to the TG-71 factors: field sizes projected where each
//! factor is defined, factors looked up in the tables, and the MU calculated.
//!
//! Field projections (geometry of a divergent beam, source at SAD from the isocentre): the
//! collimator field r_c is defined at the isocentre; at distance z from the source it is
//! r_c z / SAD. SSD setup: PDD uses the field at the surface (z = SSD), Sp the field at the
//! normalisation depth (z = SSD + d0). SAD setup: Sp and TPR use the field at the point
//! (z = SPD).

use crate::formalism::{MuResult, SadFactors, SsdFactors, equivalent_square, mu_sad, mu_ssd};
use crate::tables::{Table1D, Table2D, TableError};

/// Reference conditions and tables of one machine and energy.
#[derive(Debug, Clone, PartialEq)]
pub struct BeamData {
    /// Dose per MU at the normalisation point, cGy/MU.
    pub d0_prime_cgy_per_mu: f64,
    /// Normalisation depth d0 and SSD0, cm.
    pub d0_cm: f64,
    pub ssd0_cm: f64,
    /// Source-axis distance, cm.
    pub sad_cm: f64,
    pub sc: Table1D,
    pub sp: Table1D,
    /// PDD (%) against depth and field at the surface, measured at SSD `pdd_ssd_cm`.
    pub pdd: Option<Table2D>,
    pub pdd_ssd_cm: f64,
    /// TPR against depth and field at the point.
    pub tpr: Option<Table2D>,
    /// Off-axis ratio against depth (rows) and off-axis distance at the isocentre plane
    /// (columns), cm; absent means only central-axis points can be calculated.
    pub oar: Option<Table2D>,
}

/// How the patient or phantom is set up.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Setup {
    /// Source-to-surface distance, cm.
    Ssd { ssd_cm: f64 },
    /// Isocentric: source-to-point distance, cm.
    Sad { spd_cm: f64 },
}

/// One beam to check.
#[derive(Debug, Clone, PartialEq)]
pub struct BeamGeometry {
    /// Collimator field at the isocentre, cm (x by y).
    pub field_cm: (f64, f64),
    pub depth_cm: f64,
    pub setup: Setup,
    /// Off-axis distance of the point at the isocentre plane, cm.
    pub off_axis_cm: f64,
    pub dose_cgy: f64,
    pub wedge: f64,
    pub tray: f64,
}

/// MU for a beam whose scatter comes from Clarkson integration of its aperture (isocentric
/// formalism with the TPR table, whatever the setup: TG-71's SAD form with the inverse square
/// to the point applies to any geometry when TPR data are used).
pub fn calculate_clarkson(
    data: &BeamData,
    beam: &BeamGeometry,
    spd_cm: f64,
    aperture: &crate::clarkson::Aperture,
    point_cm: (f64, f64),
    sectors: usize,
) -> Result<(MuResult, crate::clarkson::Clarkson), TableError> {
    let tpr = data.tpr.as_ref().ok_or_else(|| {
        TableError("Clarkson integration needs a TPR table in the beam data".into())
    })?;
    let rc = equivalent_square(beam.field_cm.0, beam.field_cm.1);
    let oar = off_axis_ratio(data, beam)?;
    let c = crate::clarkson::integrate(
        tpr,
        &data.sp,
        aperture,
        point_cm,
        beam.depth_cm,
        spd_cm / data.sad_cm,
        sectors,
    )?;
    let sc = data.sc.at(rc)?;
    let isf = ((data.ssd0_cm + data.d0_cm) / spd_cm).powi(2);
    let dose_per_mu = data.d0_prime_cgy_per_mu * sc * c.sp_tpr * beam.wedge * beam.tray * oar * isf;
    let f = |symbol: &'static str, description: &str, value: f64| crate::formalism::Factor {
        symbol,
        description: description.into(),
        value,
    };
    let result = MuResult {
        dose_per_mu_cgy: dose_per_mu,
        mu: beam.dose_cgy / dose_per_mu,
        factors: vec![
            f("D", "dose at the point (cGy)", beam.dose_cgy),
            f(
                "D0'",
                "dose per MU at the normalisation point (cGy/MU)",
                data.d0_prime_cgy_per_mu,
            ),
            f("Sc", "collimator scatter at the jaw field", sc),
            f("TPR(d,0)", "zero-field TPR, extrapolated", c.tpr_zero),
            f(
                "Sp(0)",
                "zero-field phantom scatter, extrapolated",
                c.sp_zero,
            ),
            f(
                "SPR",
                "mean scatter-phantom ratio over the sectors",
                c.mean_spr,
            ),
            f("[Sp TPR]", "Sp(0) (TPR(d,0) + SPR), Clarkson", c.sp_tpr),
            f("WF", "wedge factor", beam.wedge),
            f("TF", "tray factor", beam.tray),
            f("OAR", "off-axis ratio", oar),
            f("ISF", "((SSD0 + d0)/SPD)^2", isf),
        ],
    };
    Ok((result, c))
}

fn off_axis_ratio(data: &BeamData, beam: &BeamGeometry) -> Result<f64, TableError> {
    match (&data.oar, beam.off_axis_cm) {
        (_, x) if x.abs() < 1e-9 => Ok(1.0),
        (Some(t), x) => t.at(beam.depth_cm, x.abs()),
        (None, x) => Err(TableError(format!(
            "the point is {x} cm off axis but the beam data hold no off-axis ratios"
        ))),
    }
}

/// MU for a beam from the beam data; any value outside a table is an error naming it.
pub fn calculate(data: &BeamData, beam: &BeamGeometry) -> Result<MuResult, TableError> {
    let rc = equivalent_square(beam.field_cm.0, beam.field_cm.1);
    let oar = off_axis_ratio(data, beam)?;
    match beam.setup {
        Setup::Ssd { ssd_cm } => {
            let pdd = data.pdd.as_ref().ok_or_else(|| {
                TableError("an SSD setup needs a PDD table in the beam data".into())
            })?;
            let r_surface = rc * ssd_cm / data.sad_cm;
            let r_d0 = rc * (ssd_cm + data.d0_cm) / data.sad_cm;
            Ok(mu_ssd(&SsdFactors {
                dose_cgy: beam.dose_cgy,
                d0_prime_cgy_per_mu: data.d0_prime_cgy_per_mu,
                sc: data.sc.at(rc)?,
                sp: data.sp.at(r_d0)?,
                pdd_percent: pdd.at(beam.depth_cm, r_surface)?,
                pdd_ssd_cm: data.pdd_ssd_cm,
                depth_cm: beam.depth_cm,
                wedge: beam.wedge,
                tray: beam.tray,
                oar,
                ssd0_cm: data.ssd0_cm,
                d0_cm: data.d0_cm,
                ssd_cm,
            }))
        }
        Setup::Sad { spd_cm } => {
            let tpr = data.tpr.as_ref().ok_or_else(|| {
                TableError("an isocentric setup needs a TPR table in the beam data".into())
            })?;
            let r_d = rc * spd_cm / data.sad_cm;
            Ok(mu_sad(&SadFactors {
                dose_cgy: beam.dose_cgy,
                d0_prime_cgy_per_mu: data.d0_prime_cgy_per_mu,
                sc: data.sc.at(rc)?,
                sp: data.sp.at(r_d)?,
                tpr: tpr.at(beam.depth_cm, r_d)?,
                wedge: beam.wedge,
                tray: beam.tray,
                oar,
                ssd0_cm: data.ssd0_cm,
                d0_cm: data.d0_cm,
                spd_cm,
            }))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Tables holding the worked example's factors at 12 x 12 cm and 10 cm depth, with other
    /// entries invented around them (test data).
    fn data() -> BeamData {
        let t1 = |name: &str, v: [f64; 3]| {
            Table1D::new(name, vec![5.0, 12.0, 20.0], v.to_vec()).expect("valid")
        };
        BeamData {
            d0_prime_cgy_per_mu: 1.0,
            d0_cm: 1.5,
            ssd0_cm: 100.0,
            sad_cm: 100.0,
            pdd_ssd_cm: 100.0,
            sc: t1("Sc", [0.970, 1.010, 1.030]),
            sp: t1("Sp", [0.980, 1.008, 1.020]),
            pdd: Some(
                Table2D::new(
                    "PDD",
                    vec![1.5, 10.0, 20.0],
                    vec![5.0, 12.0, 20.0],
                    vec![100.0, 100.0, 100.0, 62.0, 67.5, 69.0, 34.0, 39.5, 41.0],
                )
                .expect("valid"),
            ),
            tpr: Some(
                Table2D::new(
                    "TPR",
                    vec![1.5, 10.0, 20.0],
                    vec![5.0, 12.0, 20.0],
                    vec![1.0, 1.0, 1.0, 0.760, 0.800, 0.815, 0.520, 0.560, 0.580],
                )
                .expect("valid"),
            ),
            oar: Some(
                Table2D::new(
                    "OAR",
                    vec![1.5, 10.0, 20.0],
                    vec![0.0, 5.0, 10.0],
                    vec![1.0, 1.01, 1.02, 1.0, 1.02, 1.03, 1.0, 1.02, 1.03],
                )
                .expect("valid"),
            ),
        }
    }

    #[test]
    fn isocentric_example_end_to_end_from_tables() {
        // The hand calculation of formalism::tests::sad_worked_example_m1 (TG-71 SAD formula,
        // Gibbons et al 2014) recomputed through the tables: 12 x 12 cm at the isocentre,
        // 10 cm deep, SPD 100 cm -> Sc 1.010, Sp 1.008, TPR 0.800 looked up -> 238.36 MU.
        let beam = BeamGeometry {
            field_cm: (12.0, 12.0),
            depth_cm: 10.0,
            setup: Setup::Sad { spd_cm: 100.0 },
            off_axis_cm: 0.0,
            dose_cgy: 200.0,
            wedge: 1.0,
            tray: 1.0,
        };
        let r = calculate(&data(), &beam).expect("inside the tables");
        assert!((r.mu - 238.36).abs() < 0.005, "{}", r.mu);
    }

    #[test]
    fn off_axis_point_and_rectangular_field() {
        // 8 x 24 cm (equivalent square 2 x 8 x 24 / 32 = 12 cm, Sterling et al 1964) with the
        // point 5 cm off axis at 10 cm: the M1 factors times OAR 1.02 (table) -> 238.36/1.02.
        let beam = BeamGeometry {
            field_cm: (8.0, 24.0),
            depth_cm: 10.0,
            setup: Setup::Sad { spd_cm: 100.0 },
            off_axis_cm: 5.0,
            dose_cgy: 200.0,
            wedge: 1.0,
            tray: 1.0,
        };
        let r = calculate(&data(), &beam).expect("inside");
        assert!((r.mu - 238.36 / 1.02).abs() < 0.005, "{}", r.mu);
    }

    #[test]
    fn ssd_setup_projects_the_fields() {
        // SSD 100 cm, collimator 12 x 12: PDD at the surface field 12 cm (67.5 %), Sp at the
        // field at d0, 12 x 101.5/100 = 12.18 cm, interpolated between 12 and 20 cm:
        // 1.008 + 0.18/8 x 0.012 = 1.00827; MU = 200 / (1.010 x 1.00827 x 0.675) = 290.96.
        let beam = BeamGeometry {
            field_cm: (12.0, 12.0),
            depth_cm: 10.0,
            setup: Setup::Ssd { ssd_cm: 100.0 },
            off_axis_cm: 0.0,
            dose_cgy: 200.0,
            wedge: 1.0,
            tray: 1.0,
        };
        let r = calculate(&data(), &beam).expect("inside");
        let sp = 1.008 + (12.18 - 12.0) / 8.0 * 0.012;
        assert!(
            (r.mu - 200.0 / (1.010 * sp * 0.675)).abs() < 1e-9,
            "{}",
            r.mu
        );
    }

    #[test]
    fn outside_the_tables_is_an_error() {
        let beam = BeamGeometry {
            field_cm: (3.0, 3.0),
            depth_cm: 10.0,
            setup: Setup::Sad { spd_cm: 100.0 },
            off_axis_cm: 0.0,
            dose_cgy: 200.0,
            wedge: 1.0,
            tray: 1.0,
        };
        assert_eq!(
            calculate(&data(), &beam),
            Err(TableError("Sc field size 3 cm is outside the table (5 to 20 cm); extend the measured data rather than extrapolate".into()))
        );
        let mut d = data();
        d.oar = None;
        let beam = BeamGeometry {
            off_axis_cm: 2.0,
            field_cm: (12.0, 12.0),
            ..beam
        };
        assert_eq!(
            calculate(&d, &beam),
            Err(TableError(
                "the point is 2 cm off axis but the beam data hold no off-axis ratios".into()
            ))
        );
    }
}
