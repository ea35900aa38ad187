//! Exact error text and behaviour of the CSV loader (knotwise::data::load).

use std::path::PathBuf;

use knotwise::data::{self, ColumnData, DroppedRow, Frame, FrameRequest};

/// A fresh folder for one test, removed when dropped.
struct Temp(PathBuf);

impl Temp {
    fn new(name: &str) -> Temp {
        let d = std::env::temp_dir().join(format!("knotwise-data-{}-{name}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        Temp(d)
    }
    fn file(&self, bytes: &[u8]) -> PathBuf {
        let p = self.0.join("data.csv");
        std::fs::write(&p, bytes).unwrap();
        p
    }
}

impl Drop for Temp {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

fn request(path: PathBuf, numeric: &[&str], categorical: &[(&str, Option<&str>)]) -> FrameRequest {
    FrameRequest {
        path,
        display: "data.csv".into(),
        missing: vec![String::new(), "NA".into()],
        id: None,
        numeric: numeric.iter().map(|s| s.to_string()).collect(),
        categorical: categorical.iter().map(|(c, r)| (c.to_string(), r.map(str::to_string))).collect(),
    }
}

fn load_ok(name: &str, bytes: &[u8], numeric: &[&str], categorical: &[(&str, Option<&str>)]) -> Frame {
    let t = Temp::new(name);
    data::load(&request(t.file(bytes), numeric, categorical)).unwrap()
}

fn load_err(name: &str, bytes: &[u8], numeric: &[&str], categorical: &[(&str, Option<&str>)]) -> String {
    let t = Temp::new(name);
    match data::load(&request(t.file(bytes), numeric, categorical)) {
        Ok(f) => panic!("expected an error, got {f:?}"),
        Err(e) => e.to_string(),
    }
}

const NUMBER_HINT: &str = "write numbers with a dot as the decimal separator and no thousands separators; \
                           if this marks a missing value, add it to `data.missing`";

#[test]
fn missing_file() {
    let r = request(PathBuf::from("/nonexistent/knotwise/data.csv"), &["y"], &[]);
    assert_eq!(
        data::load(&r).unwrap_err().to_string(),
        "data.csv: cannot read the data: no such file or directory\n  \
         hint: `data.file` is relative to the spec's folder; check the path and the spelling"
    );
}

#[test]
fn path_is_a_directory() {
    let t = Temp::new("dir");
    let r = request(t.0.clone(), &["y"], &[]);
    assert_eq!(
        data::load(&r).unwrap_err().to_string(),
        "data.csv: cannot read the data: it is a directory\n  hint: `data.file` must name a CSV file"
    );
}

#[test]
fn empty_file() {
    assert_eq!(
        load_err("empty", b"", &["y"], &[]),
        "data.csv: the file is empty; a header row naming the columns is needed\n  \
         hint: the first line of the CSV names the columns, e.g. `price,age,district`"
    );
}

#[test]
fn header_only() {
    assert_eq!(
        load_err("header", b"y,x\n", &["y"], &[]),
        "data.csv: no data rows; the file has a header but nothing below it\n  \
         hint: add the data rows below the header line"
    );
}

#[test]
fn bom_crlf_and_digest() {
    let bytes = b"\xEF\xBB\xBFy,x\r\n1,2\r\n3,4\r\n";
    let f = load_ok("bom", bytes, &["y", "x"], &[]);
    assert_eq!(f.header, vec!["y", "x"]);
    assert_eq!(f.numeric("y"), Some(&[1.0, 3.0][..]));
    assert_eq!(f.numeric("x"), Some(&[2.0, 4.0][..]));
    assert_eq!(f.lines, vec![2, 3]);
    assert!(f.ids.is_empty(), "no id column: no per-row strings");
    assert_eq!((f.row_name(0), f.row_name(1)), ("2".to_string(), "3".to_string()));
    assert_eq!(f.n_read, 2);
    // sha256 of the raw bytes (BOM included), lower-case hex.
    assert_eq!(f.sha256.len(), 64);
    assert!(f.sha256.bytes().all(|b| b.is_ascii_digit() || (b'a'..=b'f').contains(&b)));
}

#[test]
fn sha256_of_known_bytes() {
    let f = load_ok("sha", b"y\n1\n", &["y"], &[]);
    // printf 'y\n1\n' | sha256sum
    assert_eq!(f.sha256, "b6ff7597e8694a31e17b2205359da788d370f3ab4565258279fd5a2a51e7666b");
}

#[test]
fn ragged_row() {
    assert_eq!(
        load_err("ragged", b"y,x\n1,2\n3\n", &["y"], &[]),
        "data.csv, line 3: this row has 1 field but the header has 2\n  \
         hint: every row needs one value per column; quote values that contain commas"
    );
}

#[test]
fn quoted_comma_and_newline_keep_line_numbers() {
    let bytes = b"y,label\n1,\"a, b\"\n2,\"two\nlines\"\n3,c\n4x,d\n";
    let f = load_err("quoted", bytes, &["y"], &[("label", None)]);
    assert_eq!(f, format!("data.csv, line 6, column \"y\": cannot read \"4x\" as a number\n  hint: {NUMBER_HINT}"));
    let f = load_ok("quoted-ok", b"y,label\n1,\"a, b\"\n2,\"two\nlines\"\n3,c\n", &["y"], &[("label", None)]);
    assert_eq!(f.lines, vec![2, 3, 5]);
    match &f.column("label").unwrap().data {
        ColumnData::Categorical { levels, codes, reference, counts } => {
            assert_eq!(levels, &vec!["a, b".to_string(), "c".into(), "two\nlines".into()]);
            assert_eq!(codes, &vec![0, 2, 1]);
            assert_eq!(*reference, 0);
            assert_eq!(counts, &vec![1, 1, 1]);
        }
        other => panic!("{other:?}"),
    }
    assert_eq!(f.warnings.len(), 3);
    assert_eq!(
        f.warnings[2],
        "data.csv: level \"two\\nlines\" of column \"label\" has only 1 row; its effect rests on that row alone"
    );
}

#[test]
fn non_utf8_cell() {
    assert_eq!(
        load_err("nonutf8", b"y,x\n1,2\n\xff,3\n", &["y"], &[]),
        "data.csv, line 3, column \"y\": the value is not valid UTF-8 text (bad byte at position 1)\n  \
         hint: save the file as UTF-8"
    );
}

#[test]
fn nan_inf_and_overflow_are_errors() {
    assert_eq!(
        load_err("nan", b"y,x\n1,2\nNaN,3\n", &["y"], &[]),
        "data.csv, line 3, column \"y\": cannot read \"NaN\" as a number\n  \
         hint: NaN is not a number knotwise can use; if it marks a missing value, add it to `data.missing`"
    );
    assert_eq!(
        load_err("inf", b"y,x\n1,2\n-inf,3\n", &["y"], &[]),
        "data.csv, line 3, column \"y\": cannot read \"-inf\" as a number\n  \
         hint: infinite values cannot be used; if this marks a missing value, add it to `data.missing`"
    );
    assert_eq!(
        load_err("big", b"y,x\n1,2\n1e400,3\n", &["y"], &[]),
        "data.csv, line 3, column \"y\": cannot read \"1e400\" as a number\n  \
         hint: the value is too large to be stored as a number (it overflows to infinity)"
    );
}

#[test]
fn nan_listed_as_missing_drops_the_row() {
    let t = Temp::new("nanmissing");
    let mut r = request(t.file(b"y\n1\nNaN\n2\n"), &["y"], &[]);
    r.missing = vec!["NaN".into()];
    let f = data::load(&r).unwrap();
    assert_eq!(f.numeric("y"), Some(&[1.0, 2.0][..]));
    assert_eq!(f.dropped, vec![DroppedRow { line: 3, columns: vec!["y".into()] }]);
}

#[test]
fn duplicate_column_names() {
    assert_eq!(
        load_err("dup", b"y,x,y\n1,2,3\n", &["y"], &[]),
        "data.csv, line 1: the column name \"y\" appears more than once (columns 1 and 3)\n  \
         hint: give every column a different name"
    );
}

#[test]
fn odd_column_name_is_reported_verbatim() {
    let bytes = b"\"a\"\"b<i>\nc\",x\n1,2\n7o,3\n";
    assert_eq!(
        load_err("weird", bytes, &["a\"b<i>\nc"], &[]),
        format!("data.csv, line 4, column \"a\\\"b<i>\\nc\": cannot read \"7o\" as a number\n  hint: {NUMBER_HINT}")
    );
    let f = load_ok("weird-ok", b"\"a\"\"b<i>\nc\",x\n1,2\n", &["a\"b<i>\nc"], &[]);
    assert_eq!(f.header[0], "a\"b<i>\nc");
    assert_eq!(f.lines, vec![3]);
}

#[test]
fn missing_column_with_suggestion() {
    assert_eq!(
        load_err("missingcol", b"price,age\n1,2\n", &["agee"], &[]),
        "data.csv, line 1: there is no column \"agee\"\n  hint: did you mean \"age\"? The columns are \"price\", \"age\""
    );
    assert_eq!(
        load_err("missingcol2", b"price,age\n1,2\n", &["zzzzzzzz"], &[]),
        "data.csv, line 1: there is no column \"zzzzzzzz\"\n  hint: the columns are \"price\", \"age\""
    );
}

#[test]
fn bad_number() {
    assert_eq!(
        load_err("bad", b"y,age\n1,2\n3,7o\n", &["age"], &[]),
        format!("data.csv, line 3, column \"age\": cannot read \"7o\" as a number\n  hint: {NUMBER_HINT}")
    );
}

#[test]
fn dropped_rows_are_listed() {
    let t = Temp::new("dropped");
    let mut r =
        request(t.file(b"id,y,x,d\nP1,1,NA,a\nP2,2,5,b\n,3,6,a\nP4,,,\nP5, 4 , 7 ,b\n"), &["y", "x"], &[("d", None)]);
    r.id = Some("id".into());
    let f = data::load(&r).unwrap();
    assert_eq!(f.n_read, 5);
    assert_eq!(f.lines, vec![3, 4, 6]);
    assert_eq!(f.ids, vec!["P2", "4", "P5"]);
    assert_eq!(f.numeric("y"), Some(&[2.0, 3.0, 4.0][..]));
    assert_eq!(
        f.dropped,
        vec![
            DroppedRow { line: 2, columns: vec!["x".into()] },
            DroppedRow { line: 5, columns: vec!["y".into(), "x".into(), "d".into()] },
        ]
    );
    assert_eq!(f.missing_per_column, vec![("y".into(), 1), ("x".into(), 2), ("d".into(), 1)]);
}

#[test]
fn all_rows_dropped() {
    assert_eq!(
        load_err("alldrop", b"y,x\n1,NA\n2,\n", &["y", "x"], &[]),
        "data.csv: every row has a missing value in a used column; the most often missing: \"x\" (2 of 2 rows)\n  \
         hint: check `data.missing` (the tokens read as missing), or leave out the terms with missing values"
    );
}

#[test]
fn unknown_reference_level() {
    assert_eq!(
        load_err("ref", b"y,d\n1,a\n2,bb2\n3,a\n", &["y"], &[("d", Some("bb"))]),
        "data.csv: the reference level \"bb\" does not occur in column \"d\"\n  \
         hint: did you mean \"bb2\"? The levels are \"a\", \"bb2\""
    );
}

#[test]
fn reference_level_is_found() {
    let f = load_ok("refok", b"y,d\n1,b\n2,a\n3,c\n4,a\n5,b\n6,c\n", &["y"], &[("d", Some("c"))]);
    match &f.column("d").unwrap().data {
        ColumnData::Categorical { levels, codes, reference, counts } => {
            assert_eq!(levels, &vec!["a".to_string(), "b".into(), "c".into()]);
            assert_eq!(codes, &vec![1, 0, 2, 0, 1, 2]);
            assert_eq!(*reference, 2);
            assert_eq!(counts, &vec![2, 2, 2]);
        }
        other => panic!("{other:?}"),
    }
    assert!(f.warnings.is_empty());
}

#[test]
fn single_level_categorical() {
    // The level "b" occurs only in a dropped row, so among the used rows there is one level.
    assert_eq!(
        load_err("single2", b"y,d\n1,a\n2,a\nNA,b\n", &["y"], &[("d", None)]),
        "data.csv: the categorical column \"d\" has only one level (\"a\") among the used rows; \
         a categorical term needs at least two\n  \
         hint: leave the term out of `linear`, or check the data and `data.missing`"
    );
}

#[test]
fn crlf_line_numbers_in_errors() {
    assert_eq!(
        load_err("crlf", b"y,x\r\n1,2\r\n\r\n3,4\r\n5\r\n", &["y"], &[]),
        "data.csv, line 5: this row has 1 field but the header has 2\n  \
         hint: every row needs one value per column; quote values that contain commas"
    );
    assert_eq!(
        load_err("crlf2", b"y,x\r\n1,2\r\n\"q\r\nq\",4\r\nz,5\r\n", &["x", "y"], &[]),
        format!("data.csv, line 3, column \"y\": cannot read \"q\\r\\nq\" as a number\n  hint: {NUMBER_HINT}")
    );
}
