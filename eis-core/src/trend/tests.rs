use super::*;

fn record(cell: &str, x: f64, ohmic: f64, ct: f64) -> Record {
    Record {
        cell: cell.into(),
        x,
        soc: None,
        values: vec![
            ("ohmic_resistance_ohm".into(), ohmic, Some(0.001)),
            ("charge_transfer_resistance_ohm".into(), ct, Some(0.01)),
        ],
        kk_valid: Some(true),
        source: format!("{cell}_{x}"),
    }
}

#[test]
fn least_squares_line_matches_hand_values() {
    // y = 1 + 2x exactly: slope 2, zero standard error.
    let (a, b, se) = line_fit(&[0.0, 1.0, 2.0, 3.0], &[1.0, 3.0, 5.0, 7.0]).unwrap();
    assert!((a - 1.0).abs() < 1e-12 && (b - 2.0).abs() < 1e-12 && se < 1e-12);
    // y = (0, 1, 0, 1) on x = (0, 1, 2, 3): b = 0.2, rss = 0.8, se = sqrt(0.8/2/5) = 0.2828
    let (_, b, se) = line_fit(&[0.0, 1.0, 2.0, 3.0], &[0.0, 1.0, 0.0, 1.0]).unwrap();
    assert!((b - 0.2).abs() < 1e-12 && (se - 0.282_842_712).abs() < 1e-8);
}

#[test]
fn growth_after_an_onset_is_flagged_with_that_onset() {
    let mut recs = Vec::new();
    for k in 0..11 {
        let x = 50.0 * k as f64;
        let ohmic = if x < 200.0 {
            0.1
        } else {
            0.1 + 0.0004 * (x - 200.0)
        };
        recs.push(record(
            "A",
            x,
            ohmic + 0.0005 * ((k * 7 % 3) as f64 - 1.0),
            0.5,
        ));
        recs.push(record(
            "B",
            x,
            0.1 + 0.0005 * ((k * 5 % 3) as f64 - 1.0),
            0.5,
        ));
    }
    let q = vec![
        "ohmic_resistance_ohm".to_owned(),
        "charge_transfer_resistance_ohm".to_owned(),
    ];
    let rep = analyse(&recs, "cycle", &q, &TrendSettings::default());
    assert_eq!(rep.flags.len(), 1, "{:?}", rep.flags);
    let f = &rep.flags[0];
    assert_eq!((f.cell.as_str(), f.kind), ("A", FlagKind::OhmicGrowth));
    assert_eq!(f.onset_x, Some(200.0));
    assert!(f.explanation.contains("not a safety verdict"));
}

/// One spiking point among steady neighbours is a jump flag of its own and raises no growth flag;
/// without the spike the same series is quiet (an outlier is judged against its neighbours, common
/// practice in trend screening).
#[test]
fn a_single_spike_is_its_own_flag_not_growth() {
    let ct = |k: usize| 0.5 + 0.002 * ((k * 7 % 5) as f64 - 2.0);
    let recs: Vec<Record> = (0..12)
        .map(|k| {
            let mut r = record("Z4", 25.0 * k as f64, 0.1, ct(k));
            if k == 6 {
                r.values[1].1 = 4.0 * ct(k);
            }
            r
        })
        .collect();
    let q = vec!["charge_transfer_resistance_ohm".to_owned()];
    let rep = analyse(&recs, "cycle", &q, &TrendSettings::default());
    let kinds: Vec<FlagKind> = rep.flags.iter().map(|f| f.kind).collect();
    assert_eq!(kinds, [FlagKind::SinglePointJump], "{:?}", rep.flags);
    assert_eq!(rep.flags[0].onset_x, Some(150.0));
    assert!(rep.flags[0].explanation.contains("not a safety verdict"));
    assert_eq!(rep.series[0].flagged, [6]);
    // A lasting step is not a single jump.
    let stepped: Vec<Record> = (0..12)
        .map(|k| record("Z4", 25.0 * k as f64, 0.1, if k < 6 { 0.5 } else { 2.0 }))
        .collect();
    let rep = analyse(&stepped, "cycle", &q, &TrendSettings::default());
    assert!(
        rep.flags
            .iter()
            .all(|f| f.kind != FlagKind::SinglePointJump)
    );
}

/// Series of one cell at two SOC levels are kept apart, and trends.csv names cell and SOC in
/// columns of their own (a column per field, common practice for tables read by other programs).
#[test]
fn soc_levels_are_separate_series_with_their_own_column() {
    let mut recs = Vec::new();
    for k in 0..4 {
        for soc in [20.0, 80.0] {
            let mut r = record("Z1", 50.0 * k as f64, 0.1 + soc * 1e-3, 0.5);
            r.soc = Some(soc);
            recs.push(r);
        }
    }
    let q = vec!["ohmic_resistance_ohm".to_owned()];
    let rep = analyse(&recs, "cycle", &q, &TrendSettings::default());
    let keys: Vec<(&str, Option<f64>, String)> = rep
        .series
        .iter()
        .map(|s| (s.cell.as_str(), s.soc, s.label()))
        .collect();
    assert_eq!(
        keys,
        [
            ("Z1", Some(20.0), "Z1 @ SOC 20".to_owned()),
            ("Z1", Some(80.0), "Z1 @ SOC 80".to_owned())
        ]
    );
    let csv = trends_csv(&rep);
    let mut lines = csv.lines();
    assert_eq!(
        lines.next(),
        Some("cell,soc,quantity,cycle,y,y_stderr,change_percent,slope,slope_stderr,onset,flagged")
    );
    assert!(
        lines
            .next()
            .is_some_and(|l| l.starts_with("Z1,20,ohmic_resistance_ohm,0,"))
    );
    assert!(!csv.contains('@'), "{csv}");
}

#[test]
fn a_sudden_fall_of_polarisation_is_a_possible_soft_short() {
    let recs: Vec<Record> = (0..8)
        .map(|k| record("C", k as f64 * 50.0, 0.1, if k < 6 { 0.5 } else { 0.05 }))
        .collect();
    let q = vec!["charge_transfer_resistance_ohm".to_owned()];
    let rep = analyse(&recs, "cycle", &q, &TrendSettings::default());
    let f = rep
        .flags
        .iter()
        .find(|f| f.kind == FlagKind::PossibleSoftShort)
        .unwrap();
    assert_eq!(f.onset_x, Some(300.0));
}
