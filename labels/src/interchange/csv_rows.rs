//! The label CSV: header `sheet,id,class,x,y,w,h,state`, one row per symbol.
//!
//! Numbers are written with Rust's `f64` `Display`, which prints the shortest
//! decimal that reads back to the same `f64`, and read with `str::parse::<f64>`,
//! which rounds correctly, so a box survives export and import bit for bit.
//! Reading checks the syntax of every row (column count, numbers, state) and
//! names the line of the first bad one; what the values mean (known sheet, known
//! class, box inside the sheet) is checked by [`super::import`].

use super::{Location, Row};
use crate::document::ReviewState;
use crate::error::{LabelError, Result};
use crate::geometry::BBox;
use std::path::Path;

/// The header row, in this order.
pub const HEADER: [&str; 8] = ["sheet", "id", "class", "x", "y", "w", "h", "state"];

/// The CSV text of these rows, header first, in the order given.
pub fn render(rows: &[Row]) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(HEADER).expect("writing to memory");
    for r in rows {
        let b = &r.bbox;
        w.write_record([
            r.sheet.as_str(),
            r.id.as_str(),
            r.class.as_str(),
            &b.x.to_string(),
            &b.y.to_string(),
            &b.w.to_string(),
            &b.h.to_string(),
            r.state.as_str(),
        ])
        .expect("writing to memory");
    }
    w.into_inner().expect("writing to memory")
}

/// Parses label CSV text; `path` names the file in errors, which carry the line.
pub fn parse(path: &Path, bytes: &[u8]) -> Result<Vec<(Location, Row)>> {
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .from_reader(bytes);
    let header = reader.headers().map_err(|e| csv_error(path, &e))?.clone();
    let found: Vec<&str> = header.iter().collect();
    if found != HEADER {
        return Err(LabelError::Csv {
            path: path.to_path_buf(),
            line: 1,
            message: format!(
                "the header must be `{}`, found `{}`",
                HEADER.join(","),
                found.join(",")
            ),
        });
    }
    let mut rows = Vec::new();
    for record in reader.records() {
        let record = record.map_err(|e| csv_error(path, &e))?;
        let line = record.position().map_or(0, |p| p.line());
        let at = Location::Line(line);
        let number = |i: usize| -> Result<f64> {
            let text = &record[i];
            match text.parse::<f64>() {
                Ok(v) if v.is_finite() => Ok(v),
                _ => Err(at.error(
                    path,
                    format!(
                        "column {} = {text:?} is not a finite number; fix the value",
                        HEADER[i]
                    ),
                )),
            }
        };
        let bbox = BBox::new(number(3)?, number(4)?, number(5)?, number(6)?);
        let state = ReviewState::parse(&record[7]).ok_or_else(|| {
            at.error(
                path,
                format!(
                    "state = {:?} must be draft, accepted or rejected",
                    &record[7]
                ),
            )
        })?;
        if record[0].is_empty() {
            return Err(at.error(path, "the sheet column is empty; give the sheet id"));
        }
        rows.push((
            at,
            Row {
                sheet: record[0].to_string(),
                id: record[1].to_string(),
                class: record[2].to_string(),
                bbox,
                state,
            },
        ));
    }
    Ok(rows)
}

/// A `csv` crate error as a [`LabelError::Csv`] with its line and a hint.
fn csv_error(path: &Path, err: &csv::Error) -> LabelError {
    if let csv::ErrorKind::Io(io) = err.kind() {
        return LabelError::io(path, std::io::Error::new(io.kind(), io.to_string()));
    }
    let line = err.position().map_or(0, |p| p.line());
    let message = match err.kind() {
        csv::ErrorKind::UnequalLengths { len, .. } => format!(
            "the row has {len} columns instead of {}; the file may be truncated or a field may hold an unquoted comma: re-export it or repair the row",
            HEADER.len()
        ),
        csv::ErrorKind::Utf8 { .. } => "the row is not valid UTF-8".to_string(),
        _ => err.to_string(),
    };
    LabelError::Csv {
        path: path.to_path_buf(),
        line,
        message,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn row(id: &str, x: f64) -> Row {
        Row {
            sheet: "fp-1".into(),
            id: id.into(),
            class: "pump".into(),
            bbox: BBox::new(x, 20.0, 30.5, 40.0),
            state: ReviewState::Accepted,
        }
    }

    #[test]
    fn renders_the_header_and_rows() {
        let text = String::from_utf8(render(&[row("s0001", 10.25)])).unwrap();
        assert_eq!(
            text,
            "sheet,id,class,x,y,w,h,state\nfp-1,s0001,pump,10.25,20,30.5,40,accepted\n"
        );
    }

    #[test]
    fn truncated_file_names_the_line() {
        let full = render(&[row("s0001", 1.0), row("s0002", 2.0), row("s0003", 3.0)]);
        let text = String::from_utf8(full).unwrap();
        let cut = &text[..text.len() - 20];
        let err = parse(Path::new("in/labels.csv"), cut.as_bytes()).unwrap_err();
        let msg = err.to_string();
        assert!(matches!(err, LabelError::Csv { line: 4, .. }), "{msg}");
        assert!(
            msg.starts_with("in/labels.csv:4:") && msg.contains("truncated"),
            "{msg}"
        );
    }

    #[test]
    fn bad_number_and_state_name_the_line() {
        let text = "sheet,id,class,x,y,w,h,state\nfp-1,a,pump,1,2,3,4,draft\nfp-1,b,pump,1,zwei,3,4,draft\n";
        let msg = parse(Path::new("l.csv"), text.as_bytes())
            .unwrap_err()
            .to_string();
        assert!(
            msg.starts_with("l.csv:3:") && msg.contains("\"zwei\""),
            "{msg}"
        );
        let text = "sheet,id,class,x,y,w,h,state\nfp-1,a,pump,1,2,3,NaN,draft\n";
        let msg = parse(Path::new("l.csv"), text.as_bytes())
            .unwrap_err()
            .to_string();
        assert!(
            msg.starts_with("l.csv:2:") && msg.contains("finite"),
            "{msg}"
        );
        let text = "sheet,id,class,x,y,w,h,state\nfp-1,a,pump,1,2,3,4,done\n";
        let msg = parse(Path::new("l.csv"), text.as_bytes())
            .unwrap_err()
            .to_string();
        assert!(
            msg.starts_with("l.csv:2:") && msg.contains("draft, accepted or rejected"),
            "{msg}"
        );
    }

    #[test]
    fn wrong_header_is_refused() {
        let text = "sheet,class,x,y,w,h\nfp-1,pump,1,2,3,4\n";
        let msg = parse(Path::new("l.csv"), text.as_bytes())
            .unwrap_err()
            .to_string();
        assert!(
            msg.starts_with("l.csv:1:") && msg.contains("sheet,id,class,x,y,w,h,state"),
            "{msg}"
        );
        let msg = parse(Path::new("l.csv"), b"").unwrap_err().to_string();
        assert!(msg.starts_with("l.csv:1:"), "{msg}");
    }

    #[test]
    fn spaces_and_quotes_are_read() {
        let text = "sheet,id,class,x,y,w,h,state\n fp-1 ,\"s,1\",pump, 1.5 ,2,3,4, rejected\n";
        let rows = parse(Path::new("l.csv"), text.as_bytes()).unwrap();
        assert_eq!(rows[0].0, Location::Line(2));
        assert_eq!(rows[0].1.id, "s,1");
        assert_eq!(rows[0].1.bbox.x, 1.5);
        assert_eq!(rows[0].1.state, ReviewState::Rejected);
    }

    #[test]
    fn every_truncation_parses_or_names_a_line() {
        let text = render(&[row("s0001", 1.5), row("s0002", 2.0), row("s0003", 3.25)]);
        for cut in 0..text.len() {
            match parse(Path::new("t.csv"), &text[..cut]) {
                Ok(rows) => assert!(rows.len() <= 3),
                Err(LabelError::Csv { line, .. }) => assert!((1..=4).contains(&line), "cut {cut}"),
                Err(e) => panic!("cut {cut}: {e}"),
            }
        }
    }

    proptest! {
        #[test]
        fn arbitrary_rows_parse_or_name_a_data_line(bytes in prop::collection::vec(any::<u8>(), 0..200)) {
            let mut text = b"sheet,id,class,x,y,w,h,state\n".to_vec();
            text.extend(bytes);
            if let Err(e) = parse(Path::new("f.csv"), &text) {
                prop_assert!(matches!(e, LabelError::Csv { line, .. } if line >= 2), "{}", e);
                prop_assert!(e.to_string().starts_with("f.csv:"), "{}", e);
            }
        }
    }

    fn arb_row() -> impl Strategy<Value = Row> {
        (
            "[a-z0-9_.-]{1,12}",
            "[a-zA-Z0-9 ,\"_-]{0,10}",
            any::<f64>(),
            any::<f64>(),
            any::<f64>(),
            any::<f64>(),
            prop::sample::select(vec![
                ReviewState::Draft,
                ReviewState::Accepted,
                ReviewState::Rejected,
            ]),
        )
            .prop_filter("finite boxes", |t| {
                t.2.is_finite() && t.3.is_finite() && t.4.is_finite() && t.5.is_finite()
            })
            .prop_map(|(sheet, id, x, y, w, h, state)| Row {
                sheet,
                id: id.trim().to_string(),
                class: "valve".into(),
                bbox: BBox::new(x, y, w, h),
                state,
            })
    }

    proptest! {
        #[test]
        fn every_finite_box_round_trips_bit_for_bit(rows in prop::collection::vec(arb_row(), 0..20)) {
            let back = parse(Path::new("r.csv"), &render(&rows)).unwrap();
            let back: Vec<Row> = back.into_iter().map(|(_, r)| r).collect();
            prop_assert_eq!(back.len(), rows.len());
            for (a, b) in rows.iter().zip(&back) {
                prop_assert_eq!(a.bbox.x.to_bits(), b.bbox.x.to_bits());
                prop_assert_eq!(a.bbox.y.to_bits(), b.bbox.y.to_bits());
                prop_assert_eq!(a.bbox.w.to_bits(), b.bbox.w.to_bits());
                prop_assert_eq!(a.bbox.h.to_bits(), b.bbox.h.to_bits());
                prop_assert_eq!(a, b);
            }
        }
    }
}
