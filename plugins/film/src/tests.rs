//! The film plugin end to end on synthetic scans made by a forward model: a known dose map goes
//! through the rational channel responses (the form of Lewis and of Micke, Lewis & Yu 2011),
//! a thickness disturbance that scales every channel's optical density alike (the disturbance
//! model of Micke et al 2011), scanner drift or lateral response, and seeded noise; the
//! plugin must give the dose map back. Expected values are the forward model's own inputs
//! (analytic round trip), with tolerances stated beside each check.

use beamproof_api::film::{
    CalibrationInput, CalibrationPiece, ChannelResponse, Fiducial, FilmCalibration, FilmInput,
    FilmMeasurement, FilmPlane, RgbScan,
};
use beamproof_api::{
    Analysis, AnalysisInput, AnalysisOutput, CriteriaSet, DatasetData, Status, TestInfo, TestKind,
};

use crate::Film;

/// Invented responses of the rational form X(D) = a + b / (D - c) (Micke et al 2011), values
/// falling with dose, the red channel most sensitive; shared by the plugin's tests.
pub(crate) const RESPONSES: [ChannelResponse; 3] = [
    ChannelResponse {
        a: 0.08,
        b: 2.4,
        c: -3.6,
    },
    ChannelResponse {
        a: 0.02,
        b: 4.8,
        c: -7.0,
    },
    ChannelResponse {
        a: -0.5,
        b: 18.0,
        c: -22.0,
    },
];

/// Seeded normal deviates (64-bit LCG, Box-Muller).
struct Noise(u64);

impl Noise {
    fn normal(&mut self, sd: f64) -> f64 {
        let mut u = || {
            self.0 = self
                .0
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            ((self.0 >> 11) as f64 + 0.5) / (1u64 << 53) as f64
        };
        let (a, b) = (u(), u());
        sd * (-2.0 * a.ln()).sqrt() * (std::f64::consts::TAU * b).cos()
    }
}

/// Scan pixel pitch of the synthetic films, mm.
const PITCH: f64 = 0.5;
/// Film rotation on the scanner, degrees; the plane origin's scan position, mm.
const ANGLE: f64 = 1.5;
const ORIGIN: [f64; 2] = [35.0, 36.0];

/// Plane position (mm) of scan pixel (column, row): rows run against the plane's y.
fn plane_of(c: f64, r: f64) -> [f64; 2] {
    let (u, v) = (c * PITCH - ORIGIN[0], -(r * PITCH - ORIGIN[1]));
    let (s, co) = ANGLE.to_radians().sin_cos();
    [co * u - s * v, s * u + co * v]
}

/// Scan pixel of a plane position.
fn pixel_of(p: [f64; 2]) -> [f64; 2] {
    let (s, co) = ANGLE.to_radians().sin_cos();
    let (u, v) = (co * p[0] + s * p[1], -s * p[0] + co * p[1]);
    [(u + ORIGIN[0]) / PITCH, (-v + ORIGIN[1]) / PITCH]
}

/// The test dose map: 0.5 Gy plus a 1.5 Gy Gaussian of 15 mm standard deviation.
fn dose_map(x: f64, y: f64) -> f64 {
    0.5 + 1.5 * (-(x * x + y * y) / (2.0 * 15.0 * 15.0)).exp()
}

/// Thickness disturbance: +-3 % over the film.
fn thickness(x: f64, y: f64) -> f64 {
    1.0 + 0.03 * (std::f64::consts::TAU * x / 50.0).sin() * (std::f64::consts::TAU * y / 40.0).cos()
}

/// Normalised values of film at dose `d` with disturbance `delta`, times `gain`, with noise.
fn values(d: f64, delta: f64, gain: f64, noise: &mut Noise, sd: f64) -> [f64; 3] {
    RESPONSES.map(|r| 10f64.powf(delta * r.value(d).log10()) * gain * (1.0 + noise.normal(sd)))
}

/// A synthetic scan, 140 x 140 pixels: a 60 mm film (plane -30..30 mm) with `dose`, an
/// unexposed strip of the same lot at columns 132 to 138, open glass elsewhere; every value
/// times `gain(column)` (scanner drift and lateral response).
fn scan(
    dose: impl Fn(f64, f64) -> f64,
    gain: impl Fn(usize) -> f64,
    sd: f64,
    seed: u64,
) -> RgbScan {
    let (w, h) = (140, 140);
    let mut noise = Noise(seed);
    let mut s = RgbScan {
        source: "film.tif".into(),
        width: w,
        height: h,
        pixel_mm: [PITCH, PITCH],
        red: Vec::new(),
        green: Vec::new(),
        blue: Vec::new(),
    };
    for r in 0..h {
        for c in 0..w {
            let [x, y] = plane_of(c as f64, r as f64);
            let v = if x.abs() <= 30.0 && y.abs() <= 30.0 {
                values(dose(x, y), thickness(x, y), gain(c), &mut noise, sd)
            } else if (132..=138).contains(&c) && (20..=120).contains(&r) {
                values(0.0, 1.0, gain(c), &mut noise, sd)
            } else {
                [0.95 * gain(c); 3]
            };
            let q = v.map(|x| (x.clamp(0.0, 1.0) * 65535.0).round() as u16);
            s.red.push(q[0]);
            s.green.push(q[1]);
            s.blue.push(q[2]);
        }
    }
    s
}

fn calibration(lot: &str) -> FilmCalibration {
    let doses = [0.0, 0.5, 1.0, 2.0, 3.0];
    FilmCalibration {
        id: "cal".into(),
        lot: lot.into(),
        scan: "cal.tif".into(),
        scan_sha256: "0".into(),
        responses: RESPONSES,
        points: doses
            .iter()
            .map(|&d| beamproof_api::film::CalibrationPoint {
                label: format!("{d}"),
                dose_gy: d,
                value: RESPONSES.map(|r| r.value(d)),
                spread: [0.0; 3],
                pixels: 1,
            })
            .collect(),
        dose_range_gy: [0.0, 3.0],
    }
}

fn fiducials() -> Vec<Fiducial> {
    [[-25.0, -25.0], [25.0, -25.0], [25.0, 25.0], [-25.0, 25.0]]
        .iter()
        .enumerate()
        .map(|(i, &p)| Fiducial {
            label: format!("m{i}"),
            pixel: pixel_of(p),
            position_mm: p,
        })
        .collect()
}

fn measurement(scan: RgbScan) -> FilmMeasurement {
    FilmMeasurement {
        scan,
        lot: "L1".into(),
        calibration: calibration("L1"),
        fiducials: fiducials(),
        plane: FilmPlane::Xy,
        plane_offset_mm: 0.0,
        region_mm: [-25.0, 25.0, -25.0, 25.0],
        unexposed_region_px: None,
        lateral: None,
    }
}

fn input(film: FilmInput, method: &str) -> AnalysisInput {
    AnalysisInput {
        test: TestInfo::standalone(TestKind::Plane),
        params: [
            ("method".to_string(), serde_json::json!(method)),
            ("spacing-mm".to_string(), serde_json::json!(1.0)),
        ]
        .into_iter()
        .collect(),
        criteria: CriteriaSet {
            name: "c".into(),
            dose_difference_percent: None,
            gamma: Vec::new(),
            metrics: Default::default(),
        },
        measured: None,
        calculated: None,
        mu: None,
        film: Some(film),
    }
}

fn run(m: FilmMeasurement, method: &str) -> AnalysisOutput {
    Film.analyse(&input(FilmInput::Measure(Box::new(m)), method))
        .expect("film reads")
}

fn metric(o: &AnalysisOutput, id: &str) -> f64 {
    o.metrics
        .iter()
        .find(|m| m.id == id)
        .unwrap_or_else(|| panic!("no metric {id}"))
        .value
}

/// Relative errors (node dose / truth - 1) of the plane the plugin hands on.
fn errors(o: &AnalysisOutput, truth: impl Fn(f64, f64) -> f64) -> Vec<f64> {
    let Some(d) = &o.derived_measured else {
        panic!("no plane")
    };
    let DatasetData::Grid(g) = &d.data else {
        panic!("not a grid")
    };
    let mut e = Vec::new();
    for (j, y) in g.y_mm.iter().enumerate() {
        for (i, x) in g.x_mm.iter().enumerate() {
            e.push(g.dose[j * g.x_mm.len() + i] / truth(*x, *y) - 1.0);
        }
    }
    e
}

fn percentile(v: &[f64], p: f64) -> f64 {
    let mut a: Vec<f64> = v.iter().map(|e| e.abs()).collect();
    a.sort_by(f64::total_cmp);
    a[((a.len() - 1) as f64 * p) as usize]
}

#[test]
fn multichannel_recovers_the_dose_within_1_percent_where_the_red_channel_does_not() {
    // The forward model with a +-3 % thickness disturbance, values stored as 16-bit numbers:
    // every node within 1 % by the multichannel method (the disturbance is removed), while
    // the red channel alone is off by more than 2 % at many nodes.
    let clean = scan(dose_map, |_| 1.0, 0.0, 7);
    let multi = run(measurement(clean.clone()), "multichannel");
    let e = errors(&multi, dose_map);
    assert!(
        percentile(&e, 1.0) < 0.01,
        "multichannel max {}",
        percentile(&e, 1.0)
    );
    let red = run(measurement(clean), "red");
    let e = errors(&red, dose_map);
    assert!(
        percentile(&e, 0.75) > 0.02,
        "red 75th percentile {}",
        percentile(&e, 0.75)
    );
    // The removed disturbance is the thickness map: standard deviation of a 3 % sine
    // product over whole periods is 3 % / 2 = 1.5 % (arithmetic), give or take the region.
    let sd = metric(&multi, "disturbance-sd");
    assert!((sd - 0.015).abs() < 0.003, "disturbance sd {sd}");
    // Placement recovered: rotation, and fiducials that fit to a hundredth of a millimetre.
    assert!((metric(&multi, "rotation-deg") - ANGLE).abs() < 1e-6);
    assert!(metric(&multi, "fiducial-rms-mm") < 0.01);
    assert_eq!(multi.status_of("fiducial-rms-mm"), Some(Status::Pass));
    // With 0.2 % noise per channel and pixel the method adds noise (it weighs channel
    // differences) but no bias: half the nodes within 1 %, the mean error within 0.2 %,
    // still better than the red channel's.
    let noisy = scan(dose_map, |_| 1.0, 0.002, 7);
    let e = errors(&run(measurement(noisy.clone()), "multichannel"), dose_map);
    let mean = e.iter().sum::<f64>() / e.len() as f64;
    assert!(mean.abs() < 0.002, "multichannel mean error {mean}");
    assert!(
        percentile(&e, 0.5) < 0.01,
        "multichannel median {}",
        percentile(&e, 0.5)
    );
    let e_red = errors(&run(measurement(noisy), "red"), dose_map);
    assert!(percentile(&e_red, 0.5) > percentile(&e, 0.5));
}

#[test]
fn scanner_drift_is_removed_by_the_unexposed_strip() {
    // The day's scan reads 1.5 % bright: without the correction the dose is biased low by
    // several percent; with the strip scaled to the calibration's 0 Gy piece it is back
    // within 1 % (noise-free forward model, so the residual is the method's alone).
    let s = scan(dose_map, |_| 1.015, 0.0, 1);
    let plain = run(measurement(s.clone()), "multichannel");
    let e = errors(&plain, dose_map);
    assert!(
        percentile(&e, 0.5) > 0.03,
        "uncorrected median {}",
        percentile(&e, 0.5)
    );
    let mut m = measurement(s);
    m.unexposed_region_px = Some([133, 30, 137, 110]);
    let fixed = run(m, "multichannel");
    let e = errors(&fixed, dose_map);
    assert!(
        percentile(&e, 1.0) < 0.01,
        "corrected max {}",
        percentile(&e, 1.0)
    );
    assert!(
        fixed
            .notes
            .iter()
            .any(|n| n.contains("Unexposed-film correction"))
    );
}

#[test]
fn the_lateral_response_is_removed_with_a_uniform_film() {
    // A scanner that reads 4 % less at one edge of the bed than at the other, linearly;
    // a uniformly exposed (1 Gy) film across the bed gives the factors back.
    let lateral = |c: usize| 1.0 - 0.04 * c as f64 / 139.0 + 0.02;
    let s = scan(dose_map, lateral, 0.0, 1);
    // The uniform film covers the whole bed at 1 Gy with no disturbance.
    let mut uniform = s.clone();
    uniform.source = "uniform.tif".into();
    for i in 0..uniform.red.len() {
        let v = RESPONSES.map(|r| (r.value(1.0) * lateral(i % 140) * 65535.0).round() as u16);
        (uniform.red[i], uniform.green[i], uniform.blue[i]) = (v[0], v[1], v[2]);
    }
    let plain = run(measurement(s.clone()), "multichannel");
    assert!(percentile(&errors(&plain, dose_map), 1.0) > 0.02);
    let mut m = measurement(s);
    m.lateral = Some(uniform);
    let fixed = run(m, "multichannel");
    let e = errors(&fixed, dose_map);
    // The correction is exact at the centre columns' gain; elsewhere the factor is the same
    // at every dose, as the model here, so the whole film is within 1 %.
    assert!(
        percentile(&e, 1.0) < 0.01,
        "corrected max {}",
        percentile(&e, 1.0)
    );
}

#[test]
fn a_synthetic_calibration_scan_gives_the_responses_back() {
    // Ten pieces of 10 x 10 pixels with known doses through the responses, 0.2 % noise:
    // the fitted curves read 0.5 to 3 Gy back within 1 % (noise averages over 100 pixels).
    let doses = [0.0, 0.2, 0.4, 0.7, 1.0, 1.4, 1.8, 2.2, 2.6, 3.0];
    let (w, h) = (10 * 12, 12);
    let mut noise = Noise(3);
    let mut s = RgbScan {
        source: "cal.tif".into(),
        width: w,
        height: h,
        pixel_mm: [0.5, 0.5],
        red: Vec::new(),
        green: Vec::new(),
        blue: Vec::new(),
    };
    for _r in 0..h {
        for c in 0..w {
            let v = values(doses[c / 12], 1.0, 1.0, &mut noise, 0.002);
            let q = v.map(|x| (x * 65535.0).round() as u16);
            s.red.push(q[0]);
            s.green.push(q[1]);
            s.blue.push(q[2]);
        }
    }
    let pieces = doses
        .iter()
        .enumerate()
        .map(|(i, &d)| CalibrationPiece {
            label: format!("p{i}"),
            dose_gy: d,
            region_px: [i * 12 + 1, 1, i * 12 + 10, 10],
        })
        .collect();
    let c = CalibrationInput {
        id: "cal".into(),
        lot: "L1".into(),
        scan: s,
        scan_sha256: "0".into(),
        pieces,
    };
    let mut i = input(FilmInput::Calibrate(Box::new(c)), "multichannel");
    i.test.kind = TestKind::FilmCalibration;
    let out = Film.analyse(&i).expect("fits");
    let cal = out.calibration.as_ref().expect("a calibration");
    assert_eq!(cal.dose_range_gy, [0.0, 3.0]);
    assert_eq!(cal.lot, "L1");
    for (k, truth) in RESPONSES.iter().enumerate() {
        for d in [0.5, 1.0, 2.0, 3.0] {
            let back = cal.responses[k].dose(truth.value(d));
            assert!(
                (back / d - 1.0).abs() < 0.01,
                "channel {k} at {d} Gy: {back}"
            );
        }
    }
    assert_eq!(
        out.status_of("fit-max-residual-percent:red"),
        Some(Status::Pass)
    );
}

#[test]
fn doses_beyond_the_calibration_are_flagged_and_left_out() {
    // A 4.5 Gy spot on a film calibrated to 3 Gy: those pixels are excluded, counted and
    // failed, and the plane goes on as a point set without them.
    let hot = |x: f64, y: f64| if x * x + y * y < 25.0 { 4.5 } else { 1.0 };
    let out = run(measurement(scan(hot, |_| 1.0, 0.0, 5)), "multichannel");
    let share = metric(&out, "pixels-outside-calibration-percent");
    // Disc of radius 5 mm in a 51 x 51 mm region: 25 pi / 2601 = 3.0 % (arithmetic).
    assert!(share > 2.5 && share < 3.5, "{share}");
    assert_eq!(
        out.status_of("pixels-outside-calibration-percent"),
        Some(Status::Fail)
    );
    let Some(d) = &out.derived_measured else {
        panic!("no data")
    };
    let DatasetData::Points(p) = &d.data else {
        panic!("a point set")
    };
    assert!(
        p.dose.iter().all(|&v| v < 3.1),
        "nothing beyond the range is kept"
    );
    assert!(p.len() < 51 * 51 && p.len() > 51 * 51 - 100);
}

#[test]
fn bad_films_are_refused_with_reasons() {
    let s = scan(dose_map, |_| 1.0, 0.0, 1);
    // Another lot.
    let mut m = measurement(s.clone());
    m.lot = "L2".into();
    let e = Film
        .analyse(&input(FilmInput::Measure(Box::new(m)), "red"))
        .expect_err("lot");
    assert!(
        e.message.contains("lot `L2`") && e.message.contains("lot `L1`"),
        "{e}"
    );
    // Fiducials 5 % apart from the scan's pitch.
    let mut m = measurement(s.clone());
    m.scan.pixel_mm = [PITCH * 1.05, PITCH * 1.05];
    let e = Film
        .analyse(&input(FilmInput::Measure(Box::new(m)), "red"))
        .expect_err("resolution");
    assert!(e.message.contains("mismatched resolution"), "{e}");
    // A region larger than the film.
    let mut m = measurement(s.clone());
    m.region_mm = [-45.0, 45.0, -25.0, 25.0];
    let e = Film
        .analyse(&input(FilmInput::Measure(Box::new(m)), "red"))
        .expect_err("region");
    assert!(e.message.contains("beyond the scanned film"), "{e}");
    // A green channel with one value everywhere.
    let mut m = measurement(s);
    m.scan.green.iter_mut().for_each(|v| *v = 0);
    let e = Film
        .analyse(&input(FilmInput::Measure(Box::new(m)), "red"))
        .expect_err("channel");
    assert!(
        e.message.contains("green channel holds the single value 0"),
        "{e}"
    );
}

#[test]
fn a_saturated_calibration_piece_is_refused_by_name() {
    let mut s = scan(|_, _| 1.0, |_| 1.0, 0.0, 1);
    for v in s.red.iter_mut().take(140 * 20) {
        *v = u16::MAX;
    }
    let c = CalibrationInput {
        id: "cal".into(),
        lot: "L1".into(),
        scan: s,
        scan_sha256: "0".into(),
        pieces: vec![CalibrationPiece {
            label: "top".into(),
            dose_gy: 1.0,
            region_px: [0, 0, 139, 19],
        }],
    };
    let e = Film
        .analyse(&input(FilmInput::Calibrate(Box::new(c)), "red"))
        .expect_err("saturated");
    assert!(
        e.message.contains("piece `top`") && e.message.contains("saturated"),
        "{e}"
    );
}

trait StatusOf {
    fn status_of(&self, id: &str) -> Option<Status>;
}

impl StatusOf for AnalysisOutput {
    fn status_of(&self, id: &str) -> Option<Status> {
        self.metrics
            .iter()
            .find(|m| m.id == id)
            .and_then(|m| m.status)
    }
}
