//! Reading an arm file: TOML syntax, the schema (known keys, types, required
//! fields) and exact decimal reading. Physical facts (signs, ranges, existence of
//! referenced segments) are checked afterwards in `validate.rs`.
//!
//! Every failure is an [`ArmError`] that points at a 1-based `line:column` of the
//! file: at the offending value, at the offending key, or at the header of the
//! table that misses a required field.

use std::fmt;
use std::path::Path;

use num_bigint::BigInt;
use num_traits::{Signed, Zero};
use toml_edit::{ImDocument, Item, TableLike, Value};

use super::{pow10, Arm, Rational};

/// An error in an arm file, located at `file:line:column` (1-based).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ArmError {
    /// The file label (a path, or whatever the caller passed to [`parse_arm_str`]).
    pub file: String,
    /// 1-based line.
    pub line: usize,
    /// 1-based column, counted in characters.
    pub column: usize,
    /// The offending field, e.g. `segment[2].density` (`None` for TOML syntax errors).
    pub field: Option<String>,
    /// Full message; it names the field, e.g. `segment[2].length: must be positive, got -0.1`.
    pub message: String,
}

impl fmt::Display for ArmError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}:{}:{}: {}",
            self.file, self.line, self.column, self.message
        )
    }
}

impl std::error::Error for ArmError {}

/// Reads and validates an arm file. Returns the arm and the file text (for
/// provenance headers). A file that cannot be read is reported at `path:1:1`.
pub fn parse_arm_file(path: &Path) -> Result<(Arm, String), ArmError> {
    let text = read_arm_text(path)?;
    let arm = parse_arm_str(&text, &path.display().to_string())?;
    Ok((arm, text))
}

/// The text of an arm file, within the size limit and UTF-8; a file that cannot be
/// read is reported at `path:1:1`.
pub fn read_arm_text(path: &Path) -> Result<String, ArmError> {
    let label = path.display().to_string();
    let fail = |message: String| ArmError {
        file: label.clone(),
        line: 1,
        column: 1,
        field: None,
        message,
    };
    if path.is_dir() {
        return Err(fail("is a folder, not an arm file".into()));
    }
    // Read at most one byte past the limit: a device or a runaway file never hangs
    // or fills memory.
    use std::io::Read as _;
    let mut bytes = Vec::new();
    std::fs::File::open(path)
        .and_then(|f| f.take(MAX_ARM_FILE_BYTES + 1).read_to_end(&mut bytes))
        .map_err(|e| fail(format!("cannot read arm file: {e}")))?;
    if bytes.len() as u64 > MAX_ARM_FILE_BYTES {
        return Err(fail(format!(
            "larger than {} MB; an arm file is a few kilobytes",
            MAX_ARM_FILE_BYTES >> 20
        )));
    }
    String::from_utf8(bytes).map_err(|e| {
        fail(format!(
            "cannot read arm file: not UTF-8 text (invalid byte at offset {})",
            e.utf8_error().valid_up_to()
        ))
    })
}

/// Largest arm file read [bytes].
pub const MAX_ARM_FILE_BYTES: u64 = 4 << 20;

/// Parses and validates the text of an arm file; `file_label` is used in error
/// messages only.
pub fn parse_arm_str(text: &str, file_label: &str) -> Result<Arm, ArmError> {
    let ctx = Ctx {
        text,
        file: file_label,
    };
    let raw = read_raw(&ctx)?;
    super::validate::validate(raw, &ctx)
}

// ---------------------------------------------------------------------------
// Locations
// ---------------------------------------------------------------------------

/// The text being read, for turning byte offsets into `line:column`.
pub(super) struct Ctx<'a> {
    pub text: &'a str,
    pub file: &'a str,
}

impl Ctx<'_> {
    /// 1-based line and character column of a byte offset (clamped to the text).
    pub fn line_col(&self, offset: usize) -> (usize, usize) {
        let mut line = 1;
        let mut column = 1;
        for (i, ch) in self.text.char_indices() {
            if i >= offset {
                break;
            }
            if ch == '\n' {
                line += 1;
                column = 1;
            } else {
                column += 1;
            }
        }
        (line, column)
    }

    /// An error at byte `offset`; `message` is the full text (it names the field).
    pub fn err(&self, offset: usize, field: Option<String>, message: String) -> ArmError {
        let (line, column) = self.line_col(offset);
        ArmError {
            file: self.file.to_string(),
            line,
            column,
            field,
            message,
        }
    }

    /// An error about `field` at byte `offset`: `"<field>: <what>"`.
    pub fn field_err(&self, offset: usize, field: &str, what: impl fmt::Display) -> ArmError {
        self.err(offset, Some(field.to_string()), format!("{field}: {what}"))
    }
}

/// A value with the byte offset where it starts and its literal text.
#[derive(Clone, Debug)]
pub(super) struct Sp<T> {
    pub value: T,
    /// Byte offset of the value in the file.
    pub at: usize,
    /// The value as written in the file (trimmed), for messages.
    pub raw: String,
}

// ---------------------------------------------------------------------------
// The schema, before physical validation
// ---------------------------------------------------------------------------

/// What the file says, typed but not yet checked for physical sense.
#[derive(Debug)]
pub(super) struct RawArm {
    pub name: Sp<String>,
    pub gravity: Option<[Sp<Rational>; 2]>,
    pub expansion_order: Option<Sp<i64>>,
    /// Offset of the first `[[segment]]` header (or 0), for "no segment" errors.
    pub segments_at: usize,
    pub segments: Vec<RawSegment>,
    pub payload: Option<RawPayload>,
    pub actuators: Vec<RawActuator>,
    /// The limits of each actuator, in the order of `actuators`.
    pub limits: Vec<RawLimits>,
    pub sampling: Option<RawSampling>,
    /// Located warnings (`file:line:column: field: message`): valid but deprecated or
    /// suspicious input.
    pub warnings: Vec<String>,
}

#[derive(Debug)]
pub(super) struct RawSegment {
    pub length: Sp<Rational>,
    pub curvature_degree: Sp<i64>,
    pub density: Sp<Vec<Rational>>,
    pub bending_stiffness: Sp<Vec<Rational>>,
    pub rotary_inertia: Option<Sp<Vec<Rational>>>,
    pub damping: Option<Sp<Vec<Rational>>>,
}

#[derive(Debug)]
pub(super) struct RawPayload {
    pub mass: Option<Sp<Rational>>,
    pub rotary_inertia: Option<Sp<Rational>>,
}

#[derive(Debug)]
pub(super) struct RawSampling {
    /// The table's name as written: `sampling`, or its old name `workspace`.
    pub table: &'static str,
    pub base_bending: Option<Sp<Rational>>,
    pub extra_bending: Option<Sp<Rational>>,
    pub samples: Option<Sp<i64>>,
    pub seed: Option<Sp<i64>>,
}

#[derive(Debug)]
pub(super) enum RawActuator {
    Tendon {
        offset: Sp<Rational>,
        through_segment: Sp<i64>,
    },
    Moment {
        segment: Sp<i64>,
    },
    EndForce {
        segment: Sp<i64>,
    },
}

/// An actuator's optional input limits as written: `pretension` and `max` for a
/// tendon, `min` and `max` for the others.
#[derive(Debug, Default)]
pub(super) struct RawLimits {
    pub pretension: Option<Sp<Rational>>,
    pub min: Option<Sp<Rational>>,
    pub max: Option<Sp<Rational>>,
}

const ROOT_KEYS: &[&str] = &[
    "name",
    "gravity",
    "expansion_order",
    "segment",
    "payload",
    "actuator",
    "sampling",
    "workspace",
];
const SEGMENT_KEYS: &[&str] = &[
    "length",
    "curvature_degree",
    "density",
    "bending_stiffness",
    "rotary_inertia",
    "damping",
];
const PAYLOAD_KEYS: &[&str] = &["mass", "rotary_inertia"];
const SAMPLING_KEYS: &[&str] = &["base_bending", "extra_bending", "samples", "seed"];
const ACTUATOR_KINDS: &[&str] = &["tendon", "moment", "end_force"];
const TENDON_KEYS: &[&str] = &["kind", "offset", "through_segment", "pretension", "max"];
const MOMENT_KEYS: &[&str] = &["kind", "segment", "min", "max"];
const END_FORCE_KEYS: &[&str] = &["kind", "segment", "min", "max"];
const ALL_ACTUATOR_KEYS: &[&str] = &[
    "kind",
    "offset",
    "through_segment",
    "segment",
    "pretension",
    "min",
    "max",
];

/// A table (header table or inline table) with the offset of its header / `{`.
struct Tab<'d> {
    t: &'d dyn TableLike,
    at: usize,
    /// Path used in messages: `""` for the root, `segment[2]`, `payload`, …
    path: String,
}

impl<'d> Tab<'d> {
    fn field_name(&self, key: &str) -> String {
        if self.path.is_empty() {
            key.to_string()
        } else {
            format!("{}.{key}", self.path)
        }
    }

    fn where_(&self) -> String {
        if self.path.is_empty() {
            "at the top level".to_string()
        } else {
            format!("in {}", self.path)
        }
    }

    /// Offset of the key `key` (falls back to its value, then the table).
    fn key_at(&self, key: &str) -> usize {
        match self.t.get_key_value(key) {
            Some((k, item)) => k
                .span()
                .or_else(|| item.span())
                .map(|s| s.start)
                .unwrap_or(self.at),
            None => self.at,
        }
    }

    /// The item under `key` with the offset of its value.
    fn get(&self, key: &str) -> Option<(&'d Item, usize)> {
        let item = self.t.get(key)?;
        if item.is_none() {
            return None;
        }
        let at = item
            .span()
            .map(|s| s.start)
            .unwrap_or_else(|| self.key_at(key));
        Some((item, at))
    }
}

/// Reads the document into a [`RawArm`] (schema only).
pub(super) fn read_raw(ctx: &Ctx) -> Result<RawArm, ArmError> {
    let doc = ImDocument::parse(ctx.text).map_err(|e| {
        let at = e.span().map(|s| s.start).unwrap_or(0);
        let msg: Vec<&str> = e
            .message()
            .lines()
            .map(str::trim)
            .filter(|l| !l.is_empty())
            .collect();
        ctx.err(at, None, format!("TOML syntax error: {}", msg.join("; ")))
    })?;
    let root = Tab {
        t: doc.as_table(),
        at: 0,
        path: String::new(),
    };
    check_keys(ctx, &root, ROOT_KEYS)?;

    let name = match root.get("name") {
        Some((item, at)) => read_string(ctx, item, at, "name")?,
        None => return Err(missing(ctx, &root, "name")),
    };
    let gravity = match root.get("gravity") {
        Some((item, at)) => Some(read_vec2(ctx, item, at, "gravity")?),
        None => None,
    };
    let expansion_order = match root.get("expansion_order") {
        Some((item, at)) => Some(read_int(ctx, item, at, "expansion_order")?),
        None => None,
    };

    let (segment_tabs, segments_at) = table_list(ctx, &root, "segment")?;
    let mut segments = Vec::with_capacity(segment_tabs.len());
    for tab in &segment_tabs {
        segments.push(read_segment(ctx, tab)?);
    }

    let payload = match root.get("payload") {
        Some((item, at)) => {
            let t = item.as_table_like().ok_or_else(|| {
                ctx.field_err(
                    at,
                    "payload",
                    format!("expected a table ([payload]), got {}", item_kind(item)),
                )
            })?;
            let tab = Tab {
                t,
                at,
                path: "payload".to_string(),
            };
            Some(read_payload(ctx, &tab)?)
        }
        None => None,
    };

    let (actuator_tabs, _) = table_list(ctx, &root, "actuator")?;
    let mut actuators = Vec::with_capacity(actuator_tabs.len());
    let mut limits = Vec::with_capacity(actuator_tabs.len());
    for tab in &actuator_tabs {
        let (actuator, lim) = read_actuator(ctx, tab)?;
        actuators.push(actuator);
        limits.push(lim);
    }

    let mut warnings = Vec::new();
    let table = |name: &'static str, item: &Item, at: usize| {
        let t = item.as_table_like().ok_or_else(|| {
            ctx.field_err(
                at,
                name,
                format!("expected a table ([{name}]), got {}", item_kind(item)),
            )
        })?;
        let tab = Tab {
            t,
            at,
            path: name.to_string(),
        };
        read_sampling(ctx, &tab, name)
    };
    let sampling = match (root.get("sampling"), root.get("workspace")) {
        (Some(_), Some((_, at))) => {
            return Err(ctx.field_err(
                at,
                "workspace",
                "the file has [sampling] and its old name [workspace]; keep [sampling] only",
            ))
        }
        (Some((item, at)), None) => Some(table("sampling", item, at)?),
        (None, Some((item, at))) => {
            warnings.push(
                ctx.field_err(
                    at,
                    "workspace",
                    "[workspace] is the old name of [sampling] (configuration-space bounds for \
                     sampling, not the task-space workspace); rename the table, the old name \
                     will go in a later version",
                )
                .to_string(),
            );
            Some(table("workspace", item, at)?)
        }
        (None, None) => None,
    };

    Ok(RawArm {
        name,
        gravity,
        expansion_order,
        segments_at,
        segments,
        payload,
        actuators,
        limits,
        sampling,
        warnings,
    })
}

fn read_segment(ctx: &Ctx, tab: &Tab) -> Result<RawSegment, ArmError> {
    check_keys(ctx, tab, SEGMENT_KEYS)?;
    let req = |key: &str| tab.get(key).ok_or_else(|| missing(ctx, tab, key));
    let (item, at) = req("length")?;
    let length = read_number(ctx, item, at, &tab.field_name("length"))?;
    let (item, at) = req("curvature_degree")?;
    let curvature_degree = read_int(ctx, item, at, &tab.field_name("curvature_degree"))?;
    let (item, at) = req("density")?;
    let density = read_poly(ctx, item, at, &tab.field_name("density"))?;
    let (item, at) = req("bending_stiffness")?;
    let bending_stiffness = read_poly(ctx, item, at, &tab.field_name("bending_stiffness"))?;
    let rotary_inertia = match tab.get("rotary_inertia") {
        Some((item, at)) => Some(read_poly(ctx, item, at, &tab.field_name("rotary_inertia"))?),
        None => None,
    };
    let damping = match tab.get("damping") {
        Some((item, at)) => Some(read_poly(ctx, item, at, &tab.field_name("damping"))?),
        None => None,
    };
    Ok(RawSegment {
        length,
        curvature_degree,
        density,
        bending_stiffness,
        rotary_inertia,
        damping,
    })
}

fn read_payload(ctx: &Ctx, tab: &Tab) -> Result<RawPayload, ArmError> {
    check_keys(ctx, tab, PAYLOAD_KEYS)?;
    let num = |key: &str| -> Result<Option<Sp<Rational>>, ArmError> {
        match tab.get(key) {
            Some((item, at)) => Ok(Some(read_number(ctx, item, at, &tab.field_name(key))?)),
            None => Ok(None),
        }
    };
    let mass = num("mass")?;
    let rotary_inertia = num("rotary_inertia")?;
    Ok(RawPayload {
        mass,
        rotary_inertia,
    })
}

fn read_sampling(ctx: &Ctx, tab: &Tab, table: &'static str) -> Result<RawSampling, ArmError> {
    check_keys(ctx, tab, SAMPLING_KEYS)?;
    let num = |key: &str| -> Result<Option<Sp<Rational>>, ArmError> {
        match tab.get(key) {
            Some((item, at)) => Ok(Some(read_number(ctx, item, at, &tab.field_name(key))?)),
            None => Ok(None),
        }
    };
    let int = |key: &str| -> Result<Option<Sp<i64>>, ArmError> {
        match tab.get(key) {
            Some((item, at)) => Ok(Some(read_int(ctx, item, at, &tab.field_name(key))?)),
            None => Ok(None),
        }
    };
    Ok(RawSampling {
        table,
        base_bending: num("base_bending")?,
        extra_bending: num("extra_bending")?,
        samples: int("samples")?,
        seed: int("seed")?,
    })
}

fn read_actuator(ctx: &Ctx, tab: &Tab) -> Result<(RawActuator, RawLimits), ArmError> {
    // Keys outside every actuator kind are reported before anything else.
    check_keys(ctx, tab, ALL_ACTUATOR_KEYS)?;
    let kind_field = tab.field_name("kind");
    let (item, at) = tab.get("kind").ok_or_else(|| missing(ctx, tab, "kind"))?;
    let kind = read_string(ctx, item, at, &kind_field)?;
    let allowed = match kind.value.as_str() {
        "tendon" => TENDON_KEYS,
        "moment" => MOMENT_KEYS,
        "end_force" => END_FORCE_KEYS,
        other => {
            let mut msg = format!(
                "unknown actuator kind `{other}` (expected one of `tendon`, `moment`, `end_force`)"
            );
            if let Some(s) = suggest(other, ACTUATOR_KINDS) {
                msg.push_str(&format!("; did you mean `{s}`?"));
            }
            return Err(ctx.field_err(at, &kind_field, msg));
        }
    };
    for (key, _) in tab.t.iter() {
        if !allowed.contains(&key) {
            let uses: Vec<String> = allowed
                .iter()
                .filter(|k| **k != "kind")
                .map(|k| format!("`{k}`"))
                .collect();
            let mut msg = format!(
                "key `{key}` does not apply to a `{}` actuator (it takes {})",
                kind.value,
                uses.join(" and ")
            );
            if let Some(s) = suggest(key, &allowed[1..]) {
                msg.push_str(&format!("; did you mean `{s}`?"));
            }
            return Err(ctx.err(
                tab.key_at(key),
                Some(tab.path.clone()),
                format!("{}: {msg}", tab.path),
            ));
        }
    }
    let req_int = |key: &str| -> Result<Sp<i64>, ArmError> {
        let (item, at) = tab.get(key).ok_or_else(|| missing(ctx, tab, key))?;
        read_int(ctx, item, at, &tab.field_name(key))
    };
    let opt_num = |key: &str| -> Result<Option<Sp<Rational>>, ArmError> {
        match tab.get(key) {
            Some((item, at)) => Ok(Some(read_number(ctx, item, at, &tab.field_name(key))?)),
            None => Ok(None),
        }
    };
    let limits = RawLimits {
        pretension: opt_num("pretension")?,
        min: opt_num("min")?,
        max: opt_num("max")?,
    };
    let actuator = match kind.value.as_str() {
        "tendon" => {
            let (item, at) = tab
                .get("offset")
                .ok_or_else(|| missing(ctx, tab, "offset"))?;
            let offset = read_number(ctx, item, at, &tab.field_name("offset"))?;
            let through_segment = req_int("through_segment")?;
            RawActuator::Tendon {
                offset,
                through_segment,
            }
        }
        "moment" => RawActuator::Moment {
            segment: req_int("segment")?,
        },
        _ => RawActuator::EndForce {
            segment: req_int("segment")?,
        },
    };
    Ok((actuator, limits))
}

// ---------------------------------------------------------------------------
// Helpers: keys, tables, values
// ---------------------------------------------------------------------------

fn missing(ctx: &Ctx, tab: &Tab, key: &str) -> ArmError {
    let field = tab.field_name(key);
    ctx.field_err(tab.at, &field, "missing required field")
}

/// Rejects any key of `tab` not in `known`, suggesting the closest known key.
fn check_keys(ctx: &Ctx, tab: &Tab, known: &[&str]) -> Result<(), ArmError> {
    for (key, _) in tab.t.iter() {
        if known.contains(&key) {
            continue;
        }
        let mut msg = format!("unknown key `{key}` {}", tab.where_());
        if let Some(s) = suggest(key, known) {
            msg.push_str(&format!("; did you mean `{s}`?"));
        } else {
            let list: Vec<String> = known.iter().map(|k| format!("`{k}`")).collect();
            msg.push_str(&format!(" (known keys: {})", list.join(", ")));
        }
        let field = if tab.path.is_empty() {
            None
        } else {
            Some(tab.path.clone())
        };
        return Err(ctx.err(tab.key_at(key), field, msg));
    }
    Ok(())
}

/// The entries of an array of tables `[[key]]` (or an inline array of inline
/// tables), each with its 1-based path `key[i]`. Absent key: empty list. Also
/// returns the offset of the first entry (or of the key, or 0).
fn table_list<'d>(ctx: &Ctx, root: &Tab<'d>, key: &str) -> Result<(Vec<Tab<'d>>, usize), ArmError> {
    let Some((item, at)) = root.get(key) else {
        return Ok((Vec::new(), 0));
    };
    let mut out = Vec::new();
    match item {
        Item::ArrayOfTables(aot) => {
            for (i, t) in aot.iter().enumerate() {
                let t_at = t.span().map(|s| s.start).unwrap_or(at);
                out.push(Tab {
                    t,
                    at: t_at,
                    path: format!("{key}[{}]", i + 1),
                });
            }
        }
        Item::Value(Value::Array(arr)) => {
            for (i, v) in arr.iter().enumerate() {
                let v_at = v.span().map(|s| s.start).unwrap_or(at);
                match v.as_inline_table() {
                    Some(t) => out.push(Tab {
                        t,
                        at: v_at,
                        path: format!("{key}[{}]", i + 1),
                    }),
                    None => {
                        return Err(ctx.field_err(
                            v_at,
                            &format!("{key}[{}]", i + 1),
                            format!("expected a table, got {}", value_kind(v)),
                        ))
                    }
                }
            }
        }
        other => {
            return Err(ctx.field_err(
                at,
                key,
                format!(
                    "expected an array of tables ([[{key}]] headers), got {}",
                    item_kind(other)
                ),
            ))
        }
    }
    let first = out.first().map(|t| t.at).unwrap_or(at);
    Ok((out, first))
}

fn item_kind(item: &Item) -> &'static str {
    match item {
        Item::None => "nothing",
        Item::Value(v) => value_kind(v),
        Item::Table(_) => "a table",
        Item::ArrayOfTables(_) => "an array of tables",
    }
}

fn value_kind(v: &Value) -> &'static str {
    match v {
        Value::String(_) => "a string",
        Value::Integer(_) => "an integer",
        Value::Float(_) => "a float",
        Value::Boolean(_) => "a boolean",
        Value::Datetime(_) => "a date-time",
        Value::Array(_) => "an array",
        Value::InlineTable(_) => "an inline table",
    }
}

/// The literal text of a value as written in the file.
fn raw_text(ctx: &Ctx, v: &Value) -> String {
    v.span()
        .and_then(|s| ctx.text.get(s))
        .map(|s| s.trim().to_string())
        .unwrap_or_else(|| v.to_string().trim().to_string())
}

fn as_value<'i>(
    ctx: &Ctx,
    item: &'i Item,
    at: usize,
    field: &str,
    want: &str,
) -> Result<&'i Value, ArmError> {
    item.as_value().ok_or_else(|| {
        ctx.field_err(
            at,
            field,
            format!("expected {want}, got {}", item_kind(item)),
        )
    })
}

fn read_string(ctx: &Ctx, item: &Item, at: usize, field: &str) -> Result<Sp<String>, ArmError> {
    let v = as_value(ctx, item, at, field, "a string")?;
    match v.as_str() {
        Some(s) => Ok(Sp {
            value: s.to_string(),
            at,
            raw: raw_text(ctx, v),
        }),
        None => Err(ctx.field_err(
            at,
            field,
            format!("expected a string, got {}", value_kind(v)),
        )),
    }
}

fn read_int(ctx: &Ctx, item: &Item, at: usize, field: &str) -> Result<Sp<i64>, ArmError> {
    let v = as_value(ctx, item, at, field, "an integer")?;
    match v {
        Value::Integer(i) => Ok(Sp {
            value: *i.value(),
            at,
            raw: raw_text(ctx, v),
        }),
        Value::Float(_) => Err(ctx.field_err(
            at,
            field,
            format!("expected an integer, got the float `{}`", raw_text(ctx, v)),
        )),
        _ => Err(ctx.field_err(
            at,
            field,
            format!("expected an integer, got {}", value_kind(v)),
        )),
    }
}

/// A number read exactly: integers as they are, floats from their literal text.
fn read_number(ctx: &Ctx, item: &Item, at: usize, field: &str) -> Result<Sp<Rational>, ArmError> {
    let v = as_value(ctx, item, at, field, "a number")?;
    let value = value_number(ctx, v, at, field)?;
    Ok(Sp {
        value,
        at,
        raw: raw_text(ctx, v),
    })
}

fn value_number(ctx: &Ctx, v: &Value, at: usize, field: &str) -> Result<Rational, ArmError> {
    let x = exact_number(ctx, v, at, field)?;
    let decades = MAGNITUDE_DECADES as i32;
    let within = pow10(-decades) <= x.abs() && x.abs() <= pow10(decades);
    if !(x.is_zero() || within) {
        return Err(ctx.field_err(
            at,
            field,
            format!(
                "`{}` is outside the supported range: a number in an arm file is 0 or has a \
                 magnitude in [1e-{MAGNITUDE_DECADES}, 1e{MAGNITUDE_DECADES}] (SI units)",
                raw_text(ctx, v)
            ),
        ));
    }
    Ok(x)
}

/// Every non-zero number in an arm file lies within 10^±MAGNITUDE_DECADES: far beyond
/// any soft arm in SI units, and near enough to 1 that the model's constants (products
/// of up to five lengths with a density or stiffness) stay normal numbers even in
/// single precision.
pub const MAGNITUDE_DECADES: u32 = 9;

fn exact_number(ctx: &Ctx, v: &Value, at: usize, field: &str) -> Result<Rational, ArmError> {
    match v {
        Value::Integer(i) => Ok(Rational::from_integer(BigInt::from(*i.value()))),
        Value::Float(f) => {
            let raw = raw_text(ctx, v);
            let x = *f.value();
            if x.is_nan() || raw.contains("inf") || raw.contains("nan") {
                return Err(ctx.field_err(at, field, format!("non-finite number `{raw}`")));
            }
            if x.is_infinite() {
                return Err(ctx.field_err(at, field, format!("number `{raw}` is out of range")));
            }
            match parse_decimal(&raw) {
                Ok(r) => Ok(r),
                Err(why) => {
                    Err(ctx.field_err(at, field, format!("cannot read number `{raw}`: {why}")))
                }
            }
        }
        _ => Err(ctx.field_err(
            at,
            field,
            format!("expected a number, got {}", value_kind(v)),
        )),
    }
}

fn read_vec2(
    ctx: &Ctx,
    item: &Item,
    at: usize,
    field: &str,
) -> Result<[Sp<Rational>; 2], ArmError> {
    let v = as_value(ctx, item, at, field, "an array of two numbers")?;
    let Some(arr) = v.as_array() else {
        return Err(ctx.field_err(
            at,
            field,
            format!(
                "expected an array of two numbers [x, y], got {}",
                value_kind(v)
            ),
        ));
    };
    if arr.len() != 2 {
        return Err(ctx.field_err(
            at,
            field,
            format!(
                "expected an array of two numbers [x, y], got {} elements",
                arr.len()
            ),
        ));
    }
    let mut out = Vec::with_capacity(2);
    for e in arr.iter() {
        let e_at = e.span().map(|s| s.start).unwrap_or(at);
        let value = value_number(ctx, e, e_at, field)?;
        out.push(Sp {
            value,
            at: e_at,
            raw: raw_text(ctx, e),
        });
    }
    let y = out.pop().expect("two elements");
    let x = out.pop().expect("two elements");
    Ok([x, y])
}

/// A polynomial in σ: one number, or an array of coefficients (lowest power first).
fn read_poly(
    ctx: &Ctx,
    item: &Item,
    at: usize,
    field: &str,
) -> Result<Sp<Vec<Rational>>, ArmError> {
    let want = "a number or an array of polynomial coefficients";
    let v = as_value(ctx, item, at, field, want)?;
    let raw = raw_text(ctx, v);
    match v {
        Value::Integer(_) | Value::Float(_) => Ok(Sp {
            value: vec![value_number(ctx, v, at, field)?],
            at,
            raw,
        }),
        Value::Array(arr) => {
            if arr.is_empty() {
                return Err(ctx.field_err(at, field, "coefficient array is empty"));
            }
            let mut coeffs = Vec::with_capacity(arr.len());
            for (i, e) in arr.iter().enumerate() {
                let e_at = e.span().map(|s| s.start).unwrap_or(at);
                if !matches!(e, Value::Integer(_) | Value::Float(_)) {
                    return Err(ctx.field_err(
                        e_at,
                        field,
                        format!(
                            "coefficient {} (of σ^{i}) must be a number, got {}",
                            i + 1,
                            value_kind(e)
                        ),
                    ));
                }
                coeffs.push(value_number(ctx, e, e_at, field)?);
            }
            Ok(Sp {
                value: coeffs,
                at,
                raw,
            })
        }
        _ => Err(ctx.field_err(at, field, format!("expected {want}, got {}", value_kind(v)))),
    }
}

/// Largest decimal exponent accepted (keeps exact arithmetic cheap).
const MAX_DECIMAL_EXPONENT: i64 = 400;

/// Most significant digits a number may carry: far more than any measurement, and few
/// enough that the exact rationals of the derivation stay small whatever the writing.
pub const MAX_SIGNIFICANT_DIGITS: usize = 30;

/// Reads `[+-]digits[.digits][(e|E)[+-]digits]` (with `_` separators) exactly.
pub(super) fn parse_decimal(s: &str) -> Result<Rational, String> {
    let s: String = s.chars().filter(|c| *c != '_').collect();
    let (neg, body) = match s.as_bytes().first() {
        Some(b'-') => (true, &s[1..]),
        Some(b'+') => (false, &s[1..]),
        _ => (false, &s[..]),
    };
    let (mantissa, exponent) = match body.find(['e', 'E']) {
        Some(i) => (&body[..i], Some(&body[i + 1..])),
        None => (body, None),
    };
    let (int_part, frac_part) = match mantissa.find('.') {
        Some(i) => (&mantissa[..i], &mantissa[i + 1..]),
        None => (mantissa, ""),
    };
    let all_digits = |t: &str| t.bytes().all(|b| b.is_ascii_digit());
    if int_part.is_empty() || !all_digits(int_part) || !all_digits(frac_part) {
        return Err("not a decimal number".to_string());
    }
    if mantissa.contains('.') && frac_part.is_empty() {
        return Err("not a decimal number".to_string());
    }
    let mut exp: i64 = 0;
    if let Some(e) = exponent {
        let (eneg, edigits) = match e.as_bytes().first() {
            Some(b'-') => (true, &e[1..]),
            Some(b'+') => (false, &e[1..]),
            _ => (false, e),
        };
        if edigits.is_empty() || !all_digits(edigits) {
            return Err("malformed exponent".to_string());
        }
        let trimmed = edigits.trim_start_matches('0');
        if trimmed.len() > 6 {
            return Err("exponent out of range".to_string());
        }
        exp = trimmed.parse::<i64>().unwrap_or(0);
        if eneg {
            exp = -exp;
        }
    }
    if exp.abs() > MAX_DECIMAL_EXPONENT {
        return Err(format!(
            "exponent out of range (at most ±{MAX_DECIMAL_EXPONENT})"
        ));
    }
    let digits = format!("{int_part}{frac_part}");
    let significant = digits.trim_start_matches('0').trim_end_matches('0').len();
    if significant > MAX_SIGNIFICANT_DIGITS {
        return Err(format!(
            "{significant} significant digits; at most {MAX_SIGNIFICANT_DIGITS} are accepted"
        ));
    }
    let mut num: BigInt = digits
        .parse()
        .map_err(|_| "not a decimal number".to_string())?;
    if neg {
        num = -num;
    }
    let exp10 = exp - frac_part.len() as i64;
    let ten = BigInt::from(10u32);
    let scale = num_traits::pow(ten, exp10.unsigned_abs() as usize);
    Ok(if exp10 >= 0 {
        Rational::from_integer(num * scale)
    } else {
        Rational::new(num, scale)
    })
}

/// Closest known key to `key`, if close enough to be a plausible typo.
pub(super) fn suggest<'k>(key: &str, known: &[&'k str]) -> Option<&'k str> {
    let key_l = key.to_lowercase();
    let mut best: Option<(usize, &'k str)> = None;
    for &cand in known {
        let d = osa_distance(&key_l, cand);
        let n = key_l.chars().count().max(cand.chars().count());
        let limit = match n {
            0..=3 => 1,
            4..=7 => 2,
            _ => 3,
        };
        let close = d <= limit
            || (key_l.len() >= 4 && (cand.contains(key_l.as_str()) || key_l.contains(cand)));
        if close && best.is_none_or(|(bd, _)| d < bd) {
            best = Some((d, cand));
        }
    }
    best.map(|(_, c)| c)
}

/// Optimal-string-alignment edit distance (Levenshtein plus adjacent transpositions).
fn osa_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let (n, m) = (a.len(), b.len());
    let mut d = vec![vec![0usize; m + 1]; n + 1];
    for (i, row) in d.iter_mut().enumerate() {
        row[0] = i;
    }
    for (j, cell) in d[0].iter_mut().enumerate() {
        *cell = j;
    }
    for i in 1..=n {
        for j in 1..=m {
            let cost = usize::from(a[i - 1] != b[j - 1]);
            let mut v = (d[i - 1][j] + 1)
                .min(d[i][j - 1] + 1)
                .min(d[i - 1][j - 1] + cost);
            if i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1] {
                v = v.min(d[i - 2][j - 2] + 1);
            }
            d[i][j] = v;
        }
    }
    d[n][m]
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::{Actuator, DEFAULT_EXPANSION_ORDER};
    use num_bigint::BigInt;

    fn q(n: i64, d: i64) -> Rational {
        Rational::new(BigInt::from(n), BigInt::from(d))
    }

    const SEG: &str = "[[segment]]\nlength = 0.12\ncurvature_degree = 2\ndensity = 0.3\nbending_stiffness = 0.012\n";

    fn ok(text: &str) -> Arm {
        parse_arm_str(text, "arm.toml").unwrap_or_else(|e| panic!("unexpected error: {e}"))
    }

    /// Asserts the error's `line:column`, field and that its message contains `needle`.
    fn err_at(
        text: &str,
        line: usize,
        column: usize,
        field: Option<&str>,
        needle: &str,
    ) -> ArmError {
        let e = parse_arm_str(text, "arm.toml").expect_err("expected an error");
        assert_eq!(
            (e.line, e.column),
            (line, column),
            "wrong position for: {e}"
        );
        assert_eq!(e.field.as_deref(), field, "wrong field for: {e}");
        assert!(
            e.message.contains(needle),
            "message {:?} lacks {:?}",
            e.message,
            needle
        );
        assert_eq!(
            e.to_string(),
            format!("arm.toml:{line}:{column}: {}", e.message)
        );
        e
    }

    #[test]
    fn decimals_are_read_exactly() {
        let cases: &[(&str, Rational)] = &[
            ("0.12", q(3, 25)),
            ("1e-5", q(1, 100_000)),
            ("-9.81", q(-981, 100)),
            ("+2.5E+2", q(250, 1)),
            ("1_000.000_1", q(10_000_001, 10_000)),
            ("0.1", q(1, 10)),
            ("3", q(3, 1)),
            ("-0.0", q(0, 1)),
            ("6.02e3", q(6020, 1)),
            ("1.5e-3", q(3, 2000)),
        ];
        for (s, want) in cases {
            assert_eq!(&parse_decimal(s).unwrap(), want, "{s}");
        }
        assert!(parse_decimal("1e999").is_err());
        assert!(parse_decimal("inf").is_err());
        assert!(parse_decimal("1.").is_err());
        assert!(parse_decimal("").is_err());
    }

    #[test]
    fn numbers_in_a_file_are_exact() {
        let text = format!(
            "name = \"a\"\ngravity = [-9.81, 1e-5]\n{SEG}damping = [2e-4, 0.1, 3]\n[payload]\nmass = 0.01\n"
        );
        let arm = ok(&text);
        assert_eq!(arm.gravity, [q(-981, 100), q(1, 100_000)]);
        let s = &arm.segments[0];
        assert_eq!(s.length, q(3, 25));
        assert_eq!(s.density.coeffs, vec![q(3, 10)]);
        assert_eq!(s.bending_stiffness.coeffs, vec![q(3, 250)]);
        assert_eq!(s.damping.coeffs, vec![q(1, 5000), q(1, 10), q(3, 1)]);
        assert_eq!(arm.payload.mass, q(1, 100));
    }

    #[test]
    fn defaults() {
        let arm = ok(&format!("name = \"a\"\n{SEG}"));
        assert_eq!(arm.name, "a");
        assert_eq!(arm.gravity, [q(0, 1), q(0, 1)]);
        assert_eq!(arm.expansion_order, DEFAULT_EXPANSION_ORDER);
        assert_eq!(arm.segments.len(), 1);
        assert_eq!(arm.segments[0].curvature_degree, 2);
        assert!(arm.segments[0].rotary_inertia.is_zero());
        assert!(arm.segments[0].damping.is_zero());
        assert_eq!(arm.payload, crate::arm::Payload::default());
        assert!(arm.actuators.is_empty());
        // An empty payload table is all defaults too.
        let arm = ok(&format!("name = \"a\"\n{SEG}[payload]\n"));
        assert_eq!(arm.payload, crate::arm::Payload::default());
    }

    #[test]
    fn inline_tables_are_accepted() {
        let text = "name = \"a\"\npayload = { mass = 0.5 }\nsegment = [{ length = 1, curvature_degree = 0, density = 1, bending_stiffness = 1 }]\nactuator = [{ kind = \"moment\", segment = 1 }]\n";
        let arm = ok(text);
        assert_eq!(arm.payload.mass, q(1, 2));
        assert_eq!(arm.actuators, vec![Actuator::Moment { segment: 0 }]);
    }

    #[test]
    fn actuators_are_zero_based() {
        let text = format!(
            "name = \"a\"\n{SEG}{SEG}[[actuator]]\nkind = \"tendon\"\noffset = -0.01\nthrough_segment = 2\n[[actuator]]\nkind = \"end_force\"\nsegment = 1\n"
        );
        let arm = ok(&text);
        assert_eq!(
            arm.actuators,
            vec![
                Actuator::Tendon {
                    offset: q(-1, 100),
                    through_segment: 1
                },
                Actuator::EndForce { segment: 0 }
            ]
        );
        assert_eq!(arm.n_inputs(), 3);
    }

    #[test]
    fn syntax_errors() {
        err_at(
            "name = \"a\"\n[[segment]\n",
            2,
            10,
            None,
            "TOML syntax error",
        );
        err_at("name = \"a\nx", 1, 10, None, "TOML syntax error");
        err_at(
            "name = \"a\"\nname = \"b\"\n",
            2,
            1,
            None,
            "TOML syntax error",
        );
        // toml_edit rejects floats that overflow a double
        err_at(
            "name = \"a\"\ngravity = [1e400, 0]\n",
            2,
            12,
            None,
            "TOML syntax error",
        );
    }

    #[test]
    fn unknown_keys() {
        let e = err_at(
            "name = \"a\"\n[[segment]]\nlenght = 0.12\n",
            3,
            1,
            Some("segment[1]"),
            "unknown key `lenght` in segment[1]; did you mean `length`?",
        );
        assert_eq!(
            e.to_string(),
            "arm.toml:3:1: unknown key `lenght` in segment[1]; did you mean `length`?"
        );
        err_at(
            "nmae = \"a\"\n",
            1,
            1,
            None,
            "unknown key `nmae` at the top level; did you mean `name`?",
        );
        err_at("name = \"a\"\n  stiffness = 1\n", 2, 3, None, "known keys:");
        err_at(
            &format!("name = \"a\"\n{SEG}stiffness = 1\n"),
            7,
            1,
            Some("segment[1]"),
            "did you mean `bending_stiffness`?",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[payload]\nmas = 1\n"),
            8,
            1,
            Some("payload"),
            "unknown key `mas` in payload; did you mean `mass`?",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[limits]\ncurvature = 3\n"),
            7,
            2,
            None,
            "unknown key `limits` at the top level",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[[actuator]]\nkind = \"tendon\"\nofset = 0.01\n"),
            9,
            1,
            Some("actuator[1]"),
            "did you mean `offset`?",
        );
        err_at(
            &format!(
                "name = \"a\"\n{SEG}[[actuator]]\nkind = \"tendon\"\noffset = 0.01\nsegment = 1\n"
            ),
            10,
            1,
            Some("actuator[1]"),
            "does not apply to a `tendon` actuator",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[[actuator]]\nkind = \"moment\"\nthrough_segment = 1\n"),
            9,
            1,
            Some("actuator[1]"),
            "did you mean `segment`?",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[[actuator]]\nkind = \"tendom\"\n"),
            8,
            8,
            Some("actuator[1].kind"),
            "unknown actuator kind `tendom` (expected one of `tendon`, `moment`, `end_force`); did you mean `tendon`?",
        );
    }

    #[test]
    fn missing_fields_point_at_the_table_header() {
        err_at(
            "gravity = [0, 0]\n",
            1,
            1,
            Some("name"),
            "name: missing required field",
        );
        err_at(
            "name = \"a\"\n",
            1,
            1,
            Some("segment"),
            "at least one [[segment]]",
        );
        err_at(
            "name = \"a\"\n\n  [[segment]]\nlength = 1\ncurvature_degree = 0\ndensity = 1\n",
            3,
            3,
            Some("segment[1].bending_stiffness"),
            "segment[1].bending_stiffness: missing required field",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[[segment]]\nlength = 1\n"),
            7,
            1,
            Some("segment[2].curvature_degree"),
            "missing required field",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[[actuator]]\nkind = \"tendon\"\noffset = 0.01\n"),
            7,
            1,
            Some("actuator[1].through_segment"),
            "missing required field",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[[actuator]]\nsegment = 1\n"),
            7,
            1,
            Some("actuator[1].kind"),
            "missing required field",
        );
    }

    #[test]
    fn wrong_types() {
        err_at(
            &format!("name = 3\n{SEG}"),
            1,
            8,
            Some("name"),
            "name: expected a string, got an integer",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}curvature_degree = 2.0\n").replacen(
                "curvature_degree = 2\n",
                "",
                1,
            ),
            6,
            20,
            Some("segment[1].curvature_degree"),
            "expected an integer, got the float `2.0`",
        );
        err_at(
            &format!("name = \"a\"\ngravity = [0, -9.81, 0]\n{SEG}"),
            2,
            11,
            Some("gravity"),
            "got 3 elements",
        );
        err_at(
            &format!("name = \"a\"\ngravity = [0, \"x\"]\n{SEG}"),
            2,
            15,
            Some("gravity"),
            "expected a number, got a string",
        );
        err_at(
            "name = \"a\"\n[[segment]]\nlength = \"long\"\n",
            3,
            10,
            Some("segment[1].length"),
            "segment[1].length: expected a number, got a string",
        );
        err_at(
            "name = \"a\"\n[[segment]]\nlength = 1\ncurvature_degree = 1\ndensity = [1, true]\n",
            5,
            15,
            Some("segment[1].density"),
            "coefficient 2 (of σ^1) must be a number, got a boolean",
        );
        err_at(
            "name = \"a\"\n[[segment]]\nlength = 1\ncurvature_degree = 1\ndensity = []\n",
            5,
            11,
            Some("segment[1].density"),
            "coefficient array is empty",
        );
        err_at(
            "name = \"a\"\n[segment]\nlength = 1\n",
            2,
            1,
            Some("segment"),
            "expected an array of tables",
        );
        err_at(
            &format!("name = \"a\"\npayload = 1\n{SEG}"),
            2,
            11,
            Some("payload"),
            "expected a table",
        );
        err_at(
            "name = \"a\"\nsegment = [1]\n",
            2,
            12,
            Some("segment[1]"),
            "expected a table, got an integer",
        );
    }

    #[test]
    fn numbers_outside_the_supported_range() {
        let with_length = |l: &str| SEG.replace("length = 0.12", &format!("length = {l}"));
        for (length, needle) in [
            ("1e60", "outside the supported range"),
            ("1e-80", "outside the supported range"),
            ("2e3", "must be in [1e-4, 1e3] m"),
            ("5e-5", "must be in [1e-4, 1e3] m"),
        ] {
            err_at(
                &format!("name = \"a\"\n{}", with_length(length)),
                3,
                10,
                Some("segment[1].length"),
                needle,
            );
        }
        ok(&format!("name = \"a\"\n{}", with_length("200")));
        err_at(
            &format!("name = \"a\"\ngravity = [1e308, 1e308]\n{SEG}"),
            2,
            12,
            Some("gravity"),
            "outside the supported range",
        );
        err_at(
            &format!("name = \"a\"\ngravity = [0, -2000]\n{SEG}"),
            2,
            15,
            Some("gravity"),
            "at most 1e3 m/s²",
        );
        let tiny = SEG.replace("density = 0.3", "density = [0.3, 1e-12]");
        err_at(
            &format!("name = \"a\"\n{tiny}"),
            5,
            17,
            Some("segment[1].density"),
            "outside the supported range",
        );
    }

    #[test]
    fn long_decimals_are_refused_whatever_their_value() {
        // The cost of the exact derivation must not depend on how a number is written.
        let long = format!("0.{}", "1".repeat(300));
        let seg = SEG.replace("length = 0.12", &format!("length = {long}"));
        err_at(
            &format!("name = \"a\"\n{seg}"),
            3,
            10,
            Some("segment[1].length"),
            "300 significant digits; at most 30",
        );
        // Zeros that do not carry information are not counted.
        let padded = format!("0.{}1{}", "0".repeat(3), "0".repeat(200));
        let seg = SEG.replace("length = 0.12", &format!("length = {padded}"));
        assert_eq!(
            ok(&format!("name = \"a\"\n{seg}")).segments[0].length,
            q(1, 10_000)
        );
        let thirty = format!("0.{}", "3".repeat(30));
        assert!(parse_decimal(&thirty).is_ok());
        assert!(parse_decimal(&format!("{thirty}3")).is_err());
    }

    #[test]
    fn non_finite_numbers() {
        err_at(
            &format!("name = \"a\"\ngravity = [inf, 0]\n{SEG}"),
            2,
            12,
            Some("gravity"),
            "non-finite number `inf`",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[payload]\nmass = nan\n"),
            8,
            8,
            Some("payload.mass"),
            "payload.mass: non-finite number `nan`",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[[actuator]]\nkind = \"tendon\"\noffset = -inf\nthrough_segment = 1\n"),
            9,
            10,
            Some("actuator[1].offset"),
            "non-finite number `-inf`",
        );
        err_at(
            &format!("name = \"a\"\ngravity = [1e-401, 0]\n{SEG}"),
            2,
            12,
            Some("gravity"),
            "exponent out of range",
        );
    }

    #[test]
    fn columns_count_characters_not_bytes() {
        // "σσ" is 4 bytes but 2 characters.
        err_at(
            "# σσ\nname = \"a\" # σσ\nname2 = 1\n",
            3,
            1,
            None,
            "unknown key `name2`",
        );
        err_at(
            "name = \"σσ\"\ngravity = [0, \"x\"]\n",
            2,
            15,
            Some("gravity"),
            "expected a number",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[payload]\n\"σ\" = 1 ; mass = -1\n"),
            8,
            9,
            None,
            "TOML syntax error",
        );
    }

    #[test]
    fn read_error_is_reported_at_1_1() {
        let e = parse_arm_file(Path::new("/nonexistent/arcwright/arm.toml")).unwrap_err();
        assert_eq!((e.line, e.column), (1, 1));
        assert!(e
            .to_string()
            .starts_with("/nonexistent/arcwright/arm.toml:1:1: cannot read arm file"));
    }

    #[test]
    fn example_files_parse() {
        let reach = ok(include_str!("../../../examples/reach_arm.toml"));
        assert_eq!(reach.name, "reach_arm");
        assert_eq!(reach.segments.len(), 2);
        assert_eq!(reach.expansion_order, 4);
        assert_eq!(reach.gravity, [q(0, 1), q(-981, 100)]);
        assert_eq!(reach.segments[0].length, q(3, 25));
        assert_eq!(reach.segments[1].length, q(1, 10));
        assert_eq!(reach.payload.mass, q(1, 100));
        assert_eq!(reach.n_coords(), 6);
        assert_eq!(reach.actuators.len(), 4);
        assert_eq!(reach.n_inputs(), 4);
        assert_eq!(
            reach.actuators[1],
            Actuator::Tendon {
                offset: q(-1, 100),
                through_segment: 1
            }
        );
        assert_eq!(reach.actuators[3], Actuator::Moment { segment: 0 });

        let hang = ok(include_str!("../../../examples/hanging_taper.toml"));
        assert_eq!(hang.name, "hanging_taper");
        assert_eq!(hang.gravity, [q(981, 100), q(0, 1)]);
        assert_eq!(hang.segments.len(), 3);
        assert_eq!(hang.n_coords(), 8);
        assert_eq!(
            hang.actuators,
            vec![
                Actuator::EndForce { segment: 2 },
                Actuator::Moment { segment: 1 }
            ]
        );
        assert_eq!(hang.n_inputs(), 3);
        // The taper is continuous across segments.
        for w in hang.segments.windows(2) {
            let end = |p: &crate::arm::SigmaPoly| p.coeffs.iter().sum::<Rational>();
            assert_eq!(end(&w[0].density), w[1].density.coeffs[0]);
            assert_eq!(
                end(&w[0].bending_stiffness),
                w[1].bending_stiffness.coeffs[0]
            );
        }
        assert_eq!(hang.segments[2].density.coeffs, vec![q(6, 25), q(-2, 25)]);
    }

    #[test]
    fn sampling_table() {
        use crate::arm::Sampling;
        // Absent: None, and the default bounds apply.
        let arm = ok(&format!("name = \"a\"\n{SEG}"));
        assert_eq!(arm.sampling, None);
        assert_eq!(arm.sampling_or_default(), Sampling::default());
        // Every key.
        let arm = ok(&format!(
            "name = \"a\"\n{SEG}[sampling]\nbase_bending = 2.5\nextra_bending = 0\nsamples = 40\nseed = 7\n"
        ));
        assert_eq!(
            arm.sampling,
            Some(Sampling {
                base_bending: 2.5,
                extra_bending: 0.0,
                samples: 40,
                seed: 7
            })
        );
        // Missing keys take their defaults; inline tables work too.
        let arm = ok(&format!(
            "name = \"a\"\nsampling = {{ samples = 12 }}\n{SEG}"
        ));
        let ws = arm.sampling.unwrap();
        assert_eq!(ws.samples, 12);
        assert_eq!(ws.base_bending, Sampling::default().base_bending);
        assert_eq!(ws.seed, Sampling::default().seed);
        // An empty table is all defaults.
        let arm = ok(&format!("name = \"a\"\n{SEG}[sampling]\n"));
        assert_eq!(arm.sampling, Some(Sampling::default()));
    }

    #[test]
    fn sampling_errors() {
        err_at(
            &format!("name = \"a\"\n{SEG}[sampling]\nbase_bend = 1\n"),
            8,
            1,
            Some("sampling"),
            "unknown key `base_bend` in sampling; did you mean `base_bending`?",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[sampling]\nbase_bending = 0\n"),
            8,
            16,
            Some("sampling.base_bending"),
            "sampling.base_bending: must be in (0, 4π] rad",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[sampling]\nextra_bending = -0.1\n"),
            8,
            17,
            Some("sampling.extra_bending"),
            "must be in [0, 4π] rad (4π ≈ 12.5664), got -0.1",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[sampling]\nbase_bending = 13\n"),
            8,
            16,
            Some("sampling.base_bending"),
            "got 13",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[sampling]\nsamples = 0\n"),
            8,
            11,
            Some("sampling.samples"),
            "sampling.samples: must be an integer in 1..=1000000, got 0",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[sampling]\nsamples = 2.5\n"),
            8,
            11,
            Some("sampling.samples"),
            "expected an integer, got the float `2.5`",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[sampling]\nseed = -3\n"),
            8,
            8,
            Some("sampling.seed"),
            "sampling.seed: must be a non-negative integer, got -3",
        );
        err_at(
            &format!("name = \"a\"\nsampling = 3\n{SEG}"),
            2,
            12,
            Some("sampling"),
            "expected a table ([sampling]), got an integer",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[sampling]\nbase_bending = \"pi\"\n"),
            8,
            16,
            Some("sampling.base_bending"),
            "expected a number, got a string",
        );
    }

    #[test]
    fn garbage_never_panics() {
        let seeds = [
            include_str!("../../../examples/reach_arm.toml").to_string(),
            include_str!("../../../examples/hanging_taper.toml").to_string(),
        ];
        let alphabet: Vec<char> = "=[]{}\".,'#\n -+_e0123456789σabz\u{0}\r\t"
            .chars()
            .collect();
        let mut state: u64 = 0x2545_f491_4f6c_dd1d;
        let mut next = move || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            state
        };
        let mut runs = 0;
        for text in &seeds {
            // every truncation
            for (i, _) in text.char_indices() {
                let _ = parse_arm_str(&text[..i], "g.toml");
                runs += 1;
            }
            // random character edits
            let chars: Vec<char> = text.chars().collect();
            for _ in 0..3000 {
                let mut c = chars.clone();
                let edits = 1 + (next() % 4) as usize;
                for _ in 0..edits {
                    let pos = (next() as usize) % c.len();
                    match next() % 3 {
                        0 => c[pos] = alphabet[(next() as usize) % alphabet.len()],
                        1 => {
                            c.remove(pos);
                        }
                        _ => c.insert(pos, alphabet[(next() as usize) % alphabet.len()]),
                    }
                }
                let s: String = c.into_iter().collect();
                if let Err(e) = parse_arm_str(&s, "g.toml") {
                    assert!(e.line >= 1 && e.column >= 1);
                    assert!(e.to_string().starts_with("g.toml:"));
                }
                runs += 1;
            }
        }
        for s in [
            "",
            "\u{feff}",
            "[[",
            "=",
            "name",
            "name=",
            "name=\"\"",
            "[[segment]]",
            "a.b.c=1",
            "[payload.x]",
            "[[actuator]]\nkind=1",
            "segment=[[1]]",
        ] {
            let _ = parse_arm_str(s, "g.toml");
        }
        assert!(runs > 6000);
    }
}
