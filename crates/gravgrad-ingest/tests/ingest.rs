//! Properties of the readers: no panic on arbitrary bytes; any table of finite numbers written as
//! CSV comes back bit for bit, whatever the piece boundaries; the column map converts units.

use gravgrad_core::Location;
use gravgrad_ingest::columns::{ColumnMap, ColumnSource, Expectation};
use gravgrad_ingest::csv::read_csv_from;
use proptest::prelude::*;

const HEAD: [&str; 15] = [
    "time", "lat", "lon", "height", "roll", "pitch", "heading", "wx", "wy", "wz", "fx", "fy", "fz",
    "p_a", "p_b",
];

fn read(
    bytes: &[u8],
) -> (
    Option<gravgrad_ingest::csv::RawColumns>,
    Vec<gravgrad_core::Problem>,
) {
    read_csv_from(
        bytes,
        bytes.len() as u64,
        &Location::file("prop.csv"),
        &Expectation::default(),
    )
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 2000, .. ProptestConfig::default() })]

    /// Arbitrary bytes: the reader returns (data or problems) and never panics.
    #[test]
    fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..2048)) {
        let _ = read(&bytes);
    }

    /// Arbitrary bytes after a valid header: every problem has a row inside the file.
    #[test]
    fn garbage_rows_are_located_inside_the_file(body in proptest::collection::vec(any::<u8>(), 0..4096)) {
        let mut bytes = HEAD.join(",").into_bytes();
        bytes.push(b'\n');
        bytes.extend_from_slice(&body);
        let lines = bytes.split(|b| *b == b'\n').count() as u64;
        let (_, problems) = read(&bytes);
        for p in problems {
            if let Some(r) = p.location.row {
                prop_assert!(r >= 1 && r <= lines + 1, "row {} of {} lines: {}", r, lines, p);
            }
        }
    }

    /// Finite f64 values written with Rust's shortest round-trip formatting come back exactly.
    #[test]
    fn finite_values_round_trip(rows in proptest::collection::vec(proptest::collection::vec(-1e300f64..1e300, 15), 1..60),
                                crlf in any::<bool>(), bom in any::<bool>()) {
        let nl = if crlf { "\r\n" } else { "\n" };
        let mut text = String::new();
        if bom { text.push('\u{feff}'); }
        text.push_str(&HEAD.join(","));
        text.push_str(nl);
        for r in &rows {
            let cells: Vec<String> = r.iter().map(|v| format!("{v}")).collect();
            text.push_str(&cells.join(","));
            text.push_str(nl);
        }
        let (cols, _) = read(text.as_bytes());
        let cols = cols.expect("a table with a valid header is read");
        prop_assert_eq!(cols.n_rows(), rows.len());
        for (k, slot) in cols.plan.slots.iter().enumerate() {
            let j = HEAD.iter().position(|h| *h == slot.name).expect("slot is a header column");
            for (i, r) in rows.iter().enumerate() {
                prop_assert_eq!(cols.values[k][i].to_bits(), r[j].to_bits());
            }
        }
    }
}

#[test]
fn large_files_are_cut_into_pieces_without_losing_rows() {
    // 200k rows (~20 MB) span two read blocks and many parallel pieces; values are the row index.
    let n = 200_000;
    let mut text = HEAD.join(",");
    text.push('\n');
    for i in 0..n {
        let cells: Vec<String> = (0..15)
            .map(|j| {
                if j == 0 {
                    format!("{}", 1.4e9 + i as f64 * 0.02)
                } else {
                    format!("{}", i % 997)
                }
            })
            .collect();
        text.push_str(&cells.join(","));
        text.push('\n');
    }
    let (cols, problems) = read(text.as_bytes());
    assert!(problems.is_empty(), "{problems:?}");
    let cols = cols.unwrap();
    assert_eq!(cols.n_rows(), n);
    for (i, v) in cols.values[3].iter().enumerate() {
        assert_eq!(*v, (i % 997) as f64);
    }
}

#[test]
fn the_column_map_renames_and_converts_units() {
    // A logger writing specific force in g (standard gravity 9.80665 m/s², CGPM 1901) and
    // temperature in kelvin.
    let mut head: Vec<String> = HEAD.iter().map(|s| s.to_string()).collect();
    head[12] = "acc_z_g".into();
    head.push("temp_k".into());
    let mut text = head.join(",");
    text.push('\n');
    text.push_str("1.4e9,0,0,0,0,0,0,0,0,0,0,0,-1.0,0,0,300.15\n");
    let mut map = ColumnMap::new();
    map.insert(
        "fz".into(),
        ColumnSource {
            from: "acc_z_g".into(),
            scale: 9.80665,
            offset: 0.0,
        },
    );
    map.insert(
        "temp".into(),
        ColumnSource {
            from: "temp_k".into(),
            scale: 1.0,
            offset: -273.15,
        },
    );
    let expect = Expectation {
        map: Some(&map),
        ..Default::default()
    };
    let (cols, problems) = read_csv_from(text.as_bytes(), 0, &Location::file("m.csv"), &expect);
    assert!(problems.is_empty(), "{problems:?}");
    let cols = cols.unwrap();
    let (table, p) =
        gravgrad_ingest::read::to_table(cols.values, &cols.plan, &Location::file("m.csv"), 2);
    assert!(p.is_empty());
    assert_eq!(table.get("fz").unwrap(), &[-9.80665]);
    assert!((table.get("temp").unwrap()[0] - 27.0).abs() < 1e-12);
}
