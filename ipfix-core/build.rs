//! Compiles the copy of the IANA "IPFIX Information Elements" registry
//! (`data/iana-ipfix-elements.csv`) into a static table in `OUT_DIR`.
//!
//! The generated `ie_table.rs` is `include!`d by `src/ie.rs`. It holds:
//! - `ELEMENTS`: every row, ascending by ElementID;
//! - `POSITION_BY_ID`: ElementID → index into `ELEMENTS` (`u16::MAX` = none);
//! - `POSITION_BY_NAME`: indexes of the named rows, sorted by name bytes.
//!
//! The build fails with a message naming the row when the CSV does not have
//! the expected columns or holds a value the crate has no type for.

use std::collections::{BTreeMap, BTreeSet};
use std::error::Error;
use std::fmt::Write as _;
use std::path::PathBuf;

#[path = "src/ie/csv_rows.rs"]
mod csv_rows;

const CSV_PATH: &str = "data/iana-ipfix-elements.csv";

const COLUMNS: [&str; 9] = [
    "elementId",
    "name",
    "abstractDataType",
    "dataTypeSemantics",
    "units",
    "rangeBegin",
    "rangeEnd",
    "status",
    "reference",
];

/// Names in the IANA "IPFIX Information Element Data Types" registry that
/// `DataType` has variants for; the variant is the name with its first
/// letter upper-cased (`ipv4Address` → `Ipv4Address`).
const DATA_TYPES: [&str; 24] = [
    "octetArray",
    "unsigned8",
    "unsigned16",
    "unsigned32",
    "unsigned64",
    "signed8",
    "signed16",
    "signed32",
    "signed64",
    "float32",
    "float64",
    "boolean",
    "macAddress",
    "string",
    "dateTimeSeconds",
    "dateTimeMilliseconds",
    "dateTimeMicroseconds",
    "dateTimeNanoseconds",
    "ipv4Address",
    "ipv6Address",
    "basicList",
    "subTemplateList",
    "subTemplateMultiList",
    "unsigned256",
];

/// Names in the IANA "IPFIX Information Element Semantics" registry that
/// `Semantics` has variants for (same naming rule as `DATA_TYPES`).
const SEMANTICS: [&str; 9] = [
    "default",
    "quantity",
    "totalCounter",
    "deltaCounter",
    "identifier",
    "flags",
    "list",
    "snmpCounter",
    "snmpGauge",
];

/// IANA Information Element ids are 15 bits (RFC 7011 §3.2).
const MAX_ID: u16 = 0x7FFF;

struct Row {
    id: u16,
    name: String,
    data_type: Option<&'static str>,
    semantics: Option<&'static str>,
    units: String,
    range: Option<(String, String)>,
    deprecated: bool,
    reference: String,
}

fn main() -> Result<(), Box<dyn Error>> {
    println!("cargo:rerun-if-changed={CSV_PATH}");
    println!("cargo:rerun-if-changed=src/ie/csv_rows.rs");
    println!("cargo:rerun-if-changed=build.rs");

    let manifest = PathBuf::from(std::env::var("CARGO_MANIFEST_DIR")?);
    let text = std::fs::read_to_string(manifest.join(CSV_PATH))
        .map_err(|e| format!("{CSV_PATH}: {e}"))?;
    let rows = read_rows(&text)?;
    let source = generate(&rows)?;
    let out = PathBuf::from(std::env::var("OUT_DIR")?).join("ie_table.rs");
    std::fs::write(&out, source).map_err(|e| format!("{}: {e}", out.display()))?;
    Ok(())
}

/// Parses and checks the CSV; returns the rows ascending by id.
fn read_rows(text: &str) -> Result<Vec<Row>, Box<dyn Error>> {
    let records = csv_rows::parse(text).map_err(|e| format!("{CSV_PATH}: {e}"))?;
    let mut records = records.into_iter();
    let header = records.next().ok_or(format!("{CSV_PATH}: empty file"))?;
    if header != COLUMNS {
        return Err(format!("{CSV_PATH}: header is {header:?}, expected {COLUMNS:?}").into());
    }

    let mut by_id: BTreeMap<u16, Row> = BTreeMap::new();
    let mut names = BTreeSet::new();
    for (index, record) in records.enumerate() {
        // Data rows start on line 2 when no field spans lines (true of the copy).
        let at = format!("{CSV_PATH}: data row {}", index + 1);
        let [id, name, data_type, semantics, units, begin, end, status, reference]: [String; 9] =
            record
                .try_into()
                .map_err(|r: Vec<String>| format!("{at}: {} fields, expected 9", r.len()))?;
        let id: u16 = id.trim().parse().map_err(|e| format!("{at}: elementId {id:?}: {e}"))?;
        if id == 0 || id > MAX_ID {
            return Err(format!("{at}: elementId {id} outside 1..={MAX_ID}").into());
        }
        let data_type = known(&at, "abstractDataType", &data_type, &DATA_TYPES)?;
        let semantics = known(&at, "dataTypeSemantics", &semantics, &SEMANTICS)?;
        let range = match (begin.is_empty(), end.is_empty()) {
            (true, true) => None,
            (false, false) => Some((begin, end)),
            _ => return Err(format!("{at}: only one end of the range is given").into()),
        };
        let deprecated = match status.as_str() {
            "current" => false,
            "deprecated" => true,
            other => return Err(format!("{at}: status {other:?} is not current/deprecated").into()),
        };
        if !name.is_empty() && !names.insert(name.clone()) {
            return Err(format!("{at}: name {name:?} appears twice").into());
        }
        let row = Row { id, name, data_type, semantics, units, range, deprecated, reference };
        if by_id.insert(id, row).is_some() {
            return Err(format!("{at}: elementId {id} appears twice").into());
        }
    }
    Ok(by_id.into_values().collect())
}

/// Maps a registry name to the crate's name list; empty means "not given".
fn known(
    at: &str,
    column: &str,
    value: &str,
    list: &[&'static str],
) -> Result<Option<&'static str>, String> {
    if value.is_empty() {
        return Ok(None);
    }
    list.iter()
        .copied()
        .find(|&known| known == value)
        .map(Some)
        .ok_or_else(|| format!("{at}: {column} {value:?} has no variant in src/data_type.rs"))
}

/// `ipv4Address` → `Ipv4Address`.
fn variant(name: &str) -> String {
    let mut chars = name.chars();
    chars.next().map_or_else(String::new, |first| first.to_ascii_uppercase().to_string() + chars.as_str())
}

fn generate(rows: &[Row]) -> Result<String, Box<dyn Error>> {
    let count = rows.len();
    let mut s = String::new();
    writeln!(s, "// @generated by ipfix-core/build.rs from {CSV_PATH}. Do not edit.")?;
    writeln!(s)?;
    writeln!(s, "static ELEMENTS: [InformationElement; {count}] = [")?;
    for row in rows {
        let data_type = row.data_type.map_or("None".to_owned(), |t| format!("Some(DataType::{})", variant(t)));
        let semantics = row.semantics.map_or("None".to_owned(), |t| format!("Some(Semantics::{})", variant(t)));
        let range = row.range.as_ref().map_or("None".to_owned(), |(b, e)| format!("Some(({b:?}, {e:?}))"));
        let status = if row.deprecated { "Deprecated" } else { "Current" };
        writeln!(
            s,
            "    InformationElement {{ id: {}, name: {:?}, data_type: {data_type}, semantics: {semantics}, \
             units: {:?}, range: {range}, status: Status::{status}, reference: {:?} }},",
            row.id, row.name, row.units, row.reference
        )?;
    }
    writeln!(s, "];")?;

    let max_id = rows.last().map_or(0, |r| r.id);
    let mut by_id = vec![u16::MAX; usize::from(max_id) + 1];
    for (position, row) in rows.iter().enumerate() {
        if let Some(slot) = by_id.get_mut(usize::from(row.id)) {
            *slot = u16::try_from(position)?;
        }
    }
    writeln!(s)?;
    writeln!(s, "static POSITION_BY_ID: [u16; {}] = {by_id:?};", by_id.len())?;

    let mut by_name: Vec<(&str, u16)> = Vec::new();
    for (position, row) in rows.iter().enumerate() {
        if !row.name.is_empty() {
            by_name.push((row.name.as_str(), u16::try_from(position)?));
        }
    }
    by_name.sort_unstable();
    let by_name: Vec<u16> = by_name.into_iter().map(|(_, p)| p).collect();
    writeln!(s)?;
    writeln!(s, "static POSITION_BY_NAME: [u16; {}] = {by_name:?};", by_name.len())?;
    Ok(s)
}
