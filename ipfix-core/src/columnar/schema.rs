//! The Arrow schema of the flows and options tables, derived from the
//! compiled plans: column names, Arrow types and column order.

use std::collections::HashMap;
use std::fmt::Write as _;
use std::sync::Arc;

use arrow::datatypes::{DataType as ArrowType, Field, Fields, Schema, SchemaRef, TimeUnit};

use super::derive::DerivedColumn;
use super::{CONTRACT_KEY, LAYOUT_KEY, TABLE_KEY};
use crate::data_type::DataType;
use crate::field::ElementId;
use crate::ie;
use crate::plan::{Plan, PlanField};

/// The version of the Parquet contract, stored in the schema metadata under
/// `flowsift.contract`. Raised when a column changes meaning or type.
pub const CONTRACT_VERSION: &str = "1";

/// Which of the two tables a schema describes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum TableKind {
    /// One row per Data Record of a (non-options) Template.
    Flows,
    /// One row per Data Record of an Options Template.
    Options,
}

impl TableKind {
    /// `"flows"` or `"options"`, as written under `flowsift.table`.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Flows => "flows",
            Self::Options => "options",
        }
    }
}

/// How element values are laid out in the columns.
///
/// [`Readable`](Self::Readable), the default, is the Parquet contract that
/// `flowsift convert` writes and `flow-analytics` reads: addresses as text,
/// plus the derived columns. [`Native`](Self::Native) is for embedders who
/// want every value as typed on the wire and nothing computed: addresses
/// and MAC addresses as their octets in network order
/// (`FixedSizeBinary(4)`, `(16)`, `(6)`), no derived columns. The other
/// types, the provenance columns and the sub-template list structs are the
/// same in both.
///
/// ```
/// use arrow::datatypes::DataType as ArrowType;
/// use ipfix_core::columnar::{Layout, TableKind, TableSchema};
/// use ipfix_core::{FieldSpecifier, Plan, Template, TemplateId};
/// let t = Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::iana(8, 4)] };
/// let plan = Plan::compile(t)?;
/// let readable = TableSchema::flows([&*plan]);
/// let native = TableSchema::with_layout(TableKind::Flows, [&*plan], Layout::Native);
/// let ty = |s: &TableSchema| s.columns().iter().find(|c| c.name == "sourceIPv4Address").map(|c| c.data_type.clone());
/// assert_eq!(ty(&readable), Some(ArrowType::Utf8));
/// assert_eq!(ty(&native), Some(ArrowType::FixedSizeBinary(4)));
/// assert!(native.column_index("forwardingOutcome").is_none());
/// # Ok::<(), ipfix_core::TemplateProblem>(())
/// ```
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Hash)]
pub enum Layout {
    /// Addresses as text (RFC 5952 for IPv6), plus the derived columns.
    #[default]
    Readable,
    /// Every element as typed on the wire; no derived columns.
    Native,
}

impl Layout {
    /// `"readable"` or `"native"`, as written under `flowsift.layout`.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Readable => "readable",
            Self::Native => "native",
        }
    }
}

/// A provenance column: where a record came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Provenance {
    /// `exporter` (Utf8): the exporter's IP address as the transport saw it
    /// (the source of the UDP datagram or TCP/SCTP connection); null for an
    /// RFC 5655 file, which carries no transport.
    Exporter,
    /// `observationDomainId` (UInt32): from the Message Header (RFC 7011 §3.1).
    ObservationDomainId,
    /// `templateId` (UInt16): the Set ID of the Data Set (RFC 7011 §3.3.2).
    TemplateId,
    /// `exportTime` (Timestamp(Second, "UTC")): the Message Header's Export
    /// Time (RFC 7011 §3.1).
    ExportTime,
}

impl Provenance {
    /// The provenance columns in table order.
    pub const ALL: [Self; 4] = [Self::Exporter, Self::ObservationDomainId, Self::TemplateId, Self::ExportTime];

    /// The column name.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Exporter => "exporter",
            Self::ObservationDomainId => "observationDomainId",
            Self::TemplateId => "templateId",
            Self::ExportTime => "exportTime",
        }
    }

    /// The Arrow type.
    pub fn data_type(self) -> ArrowType {
        match self {
            Self::Exporter => ArrowType::Utf8,
            Self::ObservationDomainId => ArrowType::UInt32,
            Self::TemplateId => ArrowType::UInt16,
            Self::ExportTime => timestamp(TimeUnit::Second),
        }
    }
}

/// Name of the options table's column listing a record's scope columns.
pub(crate) const SCOPE_FIELDS: &str = "scopeFields";

/// What a column holds.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum ColumnRole {
    /// A provenance column.
    Provenance(Provenance),
    /// `scopeFields` (options table): `List<Utf8>` of the record's scope
    /// column names.
    ScopeFields,
    /// The values of one Information Element.
    Element {
        /// The element.
        element: ElementId,
        /// 1 for the first occurrence in a template, 2 for the second, ...
        occurrence: u16,
        /// True for a `{name}_octets` column: the raw octets of fields whose
        /// length did not fit the element's type.
        octets: bool,
    },
    /// A column derived from elements and options records.
    Derived(DerivedColumn),
}

/// One column of a [`TableSchema`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ColumnSpec {
    /// The column name.
    pub name: String,
    /// What it holds.
    pub role: ColumnRole,
    /// Its Arrow type.
    pub data_type: ArrowType,
}

/// The columns of one table, fixed before the first row is written.
///
/// Built from every plan seen in the first pass; a plan that arrives later
/// with a field the schema lacks still appends (the field's values are
/// counted as unplaced).
#[derive(Debug, Clone)]
pub struct TableSchema {
    kind: TableKind,
    layout: Layout,
    columns: Vec<ColumnSpec>,
    index: HashMap<String, usize>,
    arrow: SchemaRef,
}

impl TableSchema {
    /// The flows table of the given plans; options plans are skipped.
    ///
    /// Columns: provenance, then one per element in order of first
    /// appearance over `plans`, then the derived columns.
    pub fn flows<'p>(plans: impl IntoIterator<Item = &'p Plan>) -> Self {
        Self::with_layout(TableKind::Flows, plans, Layout::Readable)
    }

    /// The options table of the given plans; non-options plans are skipped.
    ///
    /// Columns: provenance, `scopeFields`, then one per element in order of
    /// first appearance over `plans`.
    pub fn options<'p>(plans: impl IntoIterator<Item = &'p Plan>) -> Self {
        Self::with_layout(TableKind::Options, plans, Layout::Readable)
    }

    /// The `kind` table of the given plans (those of the other kind are
    /// skipped) in `layout`. [`flows`](Self::flows) and
    /// [`options`](Self::options) are this with [`Layout::Readable`].
    pub fn with_layout<'p>(kind: TableKind, plans: impl IntoIterator<Item = &'p Plan>, layout: Layout) -> Self {
        let plans = plans.into_iter().filter(|p| p.is_options() == (kind == TableKind::Options));
        Self::build(kind, plans, layout)
    }

    fn build<'p>(kind: TableKind, plans: impl Iterator<Item = &'p Plan>, layout: Layout) -> Self {
        let mut columns: Vec<ColumnSpec> = Provenance::ALL
            .iter()
            .map(|p| ColumnSpec { name: p.name().to_owned(), role: ColumnRole::Provenance(*p), data_type: p.data_type() })
            .collect();
        if kind == TableKind::Options {
            columns.push(ColumnSpec {
                name: SCOPE_FIELDS.to_owned(),
                role: ColumnRole::ScopeFields,
                data_type: ArrowType::new_list(ArrowType::Utf8, true),
            });
        }
        let mut index: HashMap<String, usize> = columns.iter().enumerate().map(|(i, c)| (c.name.clone(), i)).collect();
        let mut elements = Vec::new();
        for plan in plans {
            for field in plan.fields() {
                let name = column_name(field);
                if index.contains_key(&name) {
                    // Same name ⇒ same element, occurrence and octets flag ⇒
                    // same type (both are functions of the field); a mismatch
                    // is caught when the plan is mapped.
                    continue;
                }
                index.insert(name.clone(), columns.len() + elements.len());
                elements.push(ColumnSpec {
                    name,
                    role: ColumnRole::Element {
                        element: field.spec.element,
                        occurrence: field.occurrence,
                        octets: is_octets_fallback(field),
                    },
                    data_type: element_type_in(field, layout),
                });
            }
        }
        columns.extend(elements);
        if kind == TableKind::Flows && layout == Layout::Readable {
            for d in DerivedColumn::ALL {
                index.insert(d.name().to_owned(), columns.len());
                columns.push(ColumnSpec { name: d.name().to_owned(), role: ColumnRole::Derived(d), data_type: d.data_type() });
            }
        }
        let fields: Vec<Field> = columns.iter().map(arrow_field).collect();
        let mut metadata = HashMap::from([
            (TABLE_KEY.to_owned(), kind.name().to_owned()),
            (CONTRACT_KEY.to_owned(), CONTRACT_VERSION.to_owned()),
        ]);
        if layout != Layout::Readable {
            metadata.insert(LAYOUT_KEY.to_owned(), layout.name().to_owned());
        }
        let arrow = Arc::new(Schema::new_with_metadata(fields, metadata));
        Self { kind, layout, columns, index, arrow }
    }

    /// The layout of the element columns.
    pub const fn layout(&self) -> Layout {
        self.layout
    }

    /// Which table this is.
    pub const fn kind(&self) -> TableKind {
        self.kind
    }

    /// The Arrow schema, with field and schema metadata.
    pub const fn arrow_schema(&self) -> &SchemaRef {
        &self.arrow
    }

    /// The columns in table order.
    pub fn columns(&self) -> &[ColumnSpec] {
        &self.columns
    }

    /// The position of the column called `name`.
    pub fn column_index(&self, name: &str) -> Option<usize> {
        self.index.get(name).copied()
    }
}

fn arrow_field(c: &ColumnSpec) -> Field {
    let field = Field::new(c.name.clone(), c.data_type.clone(), true);
    match &c.role {
        ColumnRole::Element { element, .. } => {
            let mut meta = HashMap::from([("ipfix.elementId".to_owned(), element.id.to_string())]);
            if let Some(pen) = element.enterprise {
                meta.insert("ipfix.enterpriseNumber".to_owned(), pen.to_string());
            }
            if let Some(t) = ie::lookup_element(*element).and_then(|e| e.data_type) {
                meta.insert("ipfix.dataType".to_owned(), t.name().to_owned());
            }
            field.with_metadata(meta)
        }
        _ => field,
    }
}

/// True when `name` is taken by a provenance or derived column (or
/// `scopeFields`), so an element of that name is numbered from `_2`.
pub(crate) fn is_reserved(name: &str) -> bool {
    name == SCOPE_FIELDS
        || Provenance::ALL.iter().any(|p| p.name() == name)
        || DerivedColumn::ALL.iter().any(|d| d.name() == name)
}

/// The base name of an element: the IANA name, `pen{PEN}_ie{ID}` for an
/// enterprise element, `ie{ID}` for an IANA id the registry does not name.
pub(crate) fn base_name(element: ElementId, out: &mut String) {
    match element.enterprise {
        Some(pen) => {
            let _ = write!(out, "pen{pen}_ie{}", element.id);
        }
        None => match ie::lookup(element.id).map(|e| e.name).filter(|n| !n.is_empty()) {
            Some(name) => out.push_str(name),
            None => {
                let _ = write!(out, "ie{}", element.id);
            }
        },
    }
}

/// True when a field's values go to a `{name}_octets` column: its Field
/// Length is not allowed for its registered type (RFC 7011 §6.2).
pub(crate) const fn is_octets_fallback(field: &PlanField) -> bool {
    field.length_mismatch
}

/// Writes the name of a field; `reserve` numbers names that collide with
/// provenance/derived columns from `_2`.
pub(crate) fn write_field_name(field: &PlanField, reserve: bool, out: &mut String) {
    let start = out.len();
    base_name(field.spec.element, out);
    let bump = u16::from(reserve && out.get(start..).is_some_and(is_reserved));
    let n = field.occurrence.saturating_add(bump);
    if n > 1 {
        let _ = write!(out, "_{n}");
    }
    if is_octets_fallback(field) {
        out.push_str("_octets");
    }
}

/// The column name of a plan field (see the [module docs](super)).
///
/// ```
/// use ipfix_core::{columnar::column_name, FieldSpecifier, Plan, Template, TemplateId};
/// let t = Template {
///     id: TemplateId(256),
///     scope_field_count: 0,
///     fields: vec![
///         FieldSpecifier::iana(8, 4),              // sourceIPv4Address
///         FieldSpecifier::iana(8, 4),              // again: RFC 7011 §8
///         FieldSpecifier::enterprise(32473, 7, 2), // enterprise element
///         FieldSpecifier::iana(145, 2),            // templateId: a provenance name
///         FieldSpecifier::iana(12, 3),             // ipv4Address in 3 octets
///     ],
/// };
/// let plan = Plan::compile(t)?;
/// let names: Vec<String> = plan.fields().iter().map(column_name).collect();
/// assert_eq!(names, ["sourceIPv4Address", "sourceIPv4Address_2", "pen32473_ie7", "templateId_2", "destinationIPv4Address_octets"]);
/// # Ok::<(), ipfix_core::TemplateProblem>(())
/// ```
pub fn column_name(field: &PlanField) -> String {
    let mut s = String::new();
    write_field_name(field, true, &mut s);
    s
}

/// Arrow Timestamp type of the given unit in UTC.
pub(crate) fn timestamp(unit: TimeUnit) -> ArrowType {
    ArrowType::Timestamp(unit, Some("UTC".into()))
}

/// The Arrow type of a scalar IPFIX type in `layout`; `None` for the list
/// types.
pub(crate) fn scalar_type(t: DataType, layout: Layout) -> Option<ArrowType> {
    Some(match (t, layout) {
        (DataType::Ipv4Address, Layout::Native) => ArrowType::FixedSizeBinary(4),
        (DataType::Ipv6Address, Layout::Native) => ArrowType::FixedSizeBinary(16),
        (DataType::MacAddress, Layout::Native) => ArrowType::FixedSizeBinary(6),
        (t, _) => readable_scalar_type(t)?,
    })
}

fn readable_scalar_type(t: DataType) -> Option<ArrowType> {
    Some(match t {
        DataType::OctetArray => ArrowType::Binary,
        DataType::Unsigned8 => ArrowType::UInt8,
        DataType::Unsigned16 => ArrowType::UInt16,
        DataType::Unsigned32 => ArrowType::UInt32,
        DataType::Unsigned64 => ArrowType::UInt64,
        DataType::Signed8 => ArrowType::Int8,
        DataType::Signed16 => ArrowType::Int16,
        DataType::Signed32 => ArrowType::Int32,
        DataType::Signed64 => ArrowType::Int64,
        DataType::Float32 => ArrowType::Float32,
        DataType::Float64 => ArrowType::Float64,
        DataType::Boolean => ArrowType::Boolean,
        DataType::MacAddress | DataType::String | DataType::Ipv4Address | DataType::Ipv6Address => ArrowType::Utf8,
        DataType::DateTimeSeconds => timestamp(TimeUnit::Second),
        DataType::DateTimeMilliseconds => timestamp(TimeUnit::Millisecond),
        DataType::DateTimeMicroseconds => timestamp(TimeUnit::Microsecond),
        DataType::DateTimeNanoseconds => timestamp(TimeUnit::Nanosecond),
        DataType::Unsigned256 => ArrowType::FixedSizeBinary(32),
        DataType::BasicList | DataType::SubTemplateList | DataType::SubTemplateMultiList => return None,
    })
}

/// The element each registered basicList element carries, by list IE id.
///
/// Only the name of the element is taken from here; its type comes from
/// the registry. Source: IANA IE 496 says srhSegmentIPv6BasicList holds
/// srhSegmentIPv6 values (facts sheet §4i, §7.3). The others pair each list
/// with the registry entry just before it (from memory, unconfirmed):
/// the BGP community lists (RFC 8549), the TCP shared-option ExID lists
/// (RFC 9740) and the UDP ExID lists (RFC 9870). A list element of another
/// type is written as a null item and counted.
const BASIC_LIST_ELEMENTS: [(u16, &str); 11] = [
    (484, "bgpCommunity"),
    (485, "bgpCommunity"),
    (487, "bgpExtendedCommunity"),
    (488, "bgpExtendedCommunity"),
    (490, "bgpLargeCommunity"),
    (491, "bgpLargeCommunity"),
    (ie::id::SRH_SEGMENT_IPV6_BASIC_LIST, "srhSegmentIPv6"),
    (523, "tcpSharedOptionExID16"),
    (524, "tcpSharedOptionExID32"),
    (528, "udpExID"),
    (529, "udpExID"),
];

/// The item type of a basicList column for the list element `list`.
///
/// A registered list whose elements are known (the table
/// above, e.g. srhSegmentIPv6BasicList → Utf8 addresses) gets the element's
/// type; any other basicList (the generic basicList IE 291, enterprise
/// lists) gets Utf8 items in the value text form, since the element is only
/// known per record.
pub fn basic_list_item_type(list: ElementId) -> ArrowType {
    basic_list_item_type_in(list, Layout::Readable)
}

/// [`basic_list_item_type`] in `layout`: in [`Layout::Native`] the
/// addresses of a registered list are `FixedSizeBinary` items.
pub fn basic_list_item_type_in(list: ElementId, layout: Layout) -> ArrowType {
    basic_list_element(list)
        .and_then(|e| e.data_type)
        .and_then(|t| scalar_type(t, layout))
        .unwrap_or(ArrowType::Utf8)
}

pub(crate) fn basic_list_element(list: ElementId) -> Option<&'static ie::InformationElement> {
    if list.enterprise.is_some() {
        return None;
    }
    let (_, name) = BASIC_LIST_ELEMENTS.iter().find(|(id, _)| *id == list.id)?;
    ie::by_name(name)
}

/// The Arrow type of subTemplateList and subTemplateMultiList columns:
/// `List<Struct{semantic: UInt8, templateId: UInt16, fields:
/// List<Struct{name: Utf8, value: Utf8}>}>`, one item per record inside
/// the list (see the [module docs](super)).
pub fn record_struct_type() -> ArrowType {
    ArrowType::new_list(ArrowType::Struct(record_struct_fields()), true)
}

pub(crate) fn record_struct_fields() -> Fields {
    Fields::from(vec![
        Field::new("semantic", ArrowType::UInt8, true),
        Field::new("templateId", ArrowType::UInt16, true),
        Field::new("fields", ArrowType::new_list(ArrowType::Struct(name_value_fields()), true), true),
    ])
}

pub(crate) fn name_value_fields() -> Fields {
    Fields::from(vec![Field::new("name", ArrowType::Utf8, true), Field::new("value", ArrowType::Utf8, true)])
}

/// The Arrow type of a plan field's column (see the [module docs](super)).
pub fn element_type(field: &PlanField) -> ArrowType {
    element_type_in(field, Layout::Readable)
}

/// [`element_type`] in `layout`.
pub fn element_type_in(field: &PlanField, layout: Layout) -> ArrowType {
    if is_octets_fallback(field) {
        return ArrowType::Binary;
    }
    match field.data_type {
        DataType::BasicList => ArrowType::new_list(basic_list_item_type_in(field.spec.element, layout), true),
        DataType::SubTemplateList | DataType::SubTemplateMultiList => record_struct_type(),
        t => scalar_type(t, layout).unwrap_or(ArrowType::Binary),
    }
}
