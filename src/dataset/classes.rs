//! The class table (`classes.toml`): ids as they appear in label files, names, and display
//! colours. Internally grove numbers classes 0..n in table order ("class index"), because
//! the forest wants dense indices while users may number their classes sparsely.

use std::collections::HashSet;
use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::error::{GroveError, Result};

/// One class: `id` is its value in single-channel label files.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct ClassInfo {
    pub id: u8,
    pub name: String,
    pub color: [u8; 3],
}

/// The validated class table.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct ClassTable {
    classes: Vec<ClassInfo>,
}

/// One line for a TOML error (the toml crate's own message spans several lines, with a
/// drawing of the place): where it is and what is wrong, in the words of the class table.
fn toml_problem(text: &str, e: &toml::de::Error) -> String {
    let what = e.message().trim().trim_end_matches('.').replace('\n', "; ");
    if what == "missing field `class`" {
        return "the class table has no [[class]] entries; add one (id, name, color) per class"
            .into();
    }
    let what = what.replace("missing field", "missing key");
    match e.span() {
        Some(span) => {
            let before = text.get(..span.start).unwrap_or(text);
            let line = before.matches('\n').count() + 1;
            let column = before[before.rfind('\n').map_or(0, |i| i + 1)..]
                .chars()
                .count()
                + 1;
            format!("invalid class table at line {line}, column {column}: {what}")
        }
        None => format!("invalid class table: {what}"),
    }
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct TableFile {
    class: Vec<ClassEntry>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ClassEntry {
    id: i64,
    name: String,
    color: String,
}

/// Longest class name accepted, in characters (names label tables, file names and columns).
pub const MAX_CLASS_NAME_CHARS: usize = 64;

/// Checks a class name. Names end up in output file names (`probabilities/IMAGE/NAME.png`),
/// in tables and in CSV/JSON keys, and a model or dataset from someone else must not steer
/// where files go: no path separators, no leading `.` (so no `..`), no control characters
/// (newlines would break tables), no surrounding spaces, 1 to 64 characters.
pub fn check_class_name(name: &str) -> std::result::Result<(), String> {
    let shown = name.escape_debug();
    if name.trim().is_empty() {
        return Err("a class has an empty name".into());
    }
    if name.chars().count() > MAX_CLASS_NAME_CHARS {
        return Err(format!(
            "class name '{shown}' is longer than {MAX_CLASS_NAME_CHARS} characters"
        ));
    }
    if let Some(c) = name
        .chars()
        .find(|&c| c == '/' || c == '\\' || c.is_control())
    {
        return Err(format!(
            "class name '{shown}' contains {}; names become file names, so use letters, digits, spaces, '-' or '_'",
            if c.is_control() { "a control character (e.g. a newline or tab)".to_string() } else { format!("'{c}'") }
        ));
    }
    if name.starts_with('.') {
        return Err(format!(
            "class name '{shown}' starts with '.'; names become file names, so start with a letter or digit"
        ));
    }
    if name.trim() != name {
        return Err(format!("class name '{shown}' starts or ends with a space"));
    }
    Ok(())
}

/// Parses `#rrggbb` (the leading `#` is optional).
pub fn parse_hex_colour(text: &str) -> Option<[u8; 3]> {
    let hex = text.trim().trim_start_matches('#');
    if hex.len() != 6 || !hex.chars().all(|c| c.is_ascii_hexdigit()) {
        return None;
    }
    let byte = |i: usize| u8::from_str_radix(&hex[i..i + 2], 16).ok();
    Some([byte(0)?, byte(2)?, byte(4)?])
}

/// `#rrggbb`.
pub fn hex_colour(c: [u8; 3]) -> String {
    format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2])
}

impl ClassTable {
    /// Reads and validates `classes.toml`; `unlabelled` is the label value reserved for
    /// "no label", which therefore cannot be a class id.
    pub fn load(path: &Path, unlabelled: u8) -> Result<Self> {
        let text = std::fs::read_to_string(path).map_err(|e| GroveError::io(path, e))?;
        Self::parse(&text, unlabelled).map_err(|m| GroveError::input(path, m))
    }

    /// Parses the TOML text; the error is a message without the file name.
    pub fn parse(text: &str, unlabelled: u8) -> std::result::Result<Self, String> {
        let file: TableFile = toml::from_str(text).map_err(|e| toml_problem(text, &e))?;
        let mut classes = Vec::with_capacity(file.class.len());
        for c in file.class {
            if !(0..=255).contains(&c.id) {
                return Err(format!(
                    "class '{}' has id {}; ids must be 0..=254",
                    c.name, c.id
                ));
            }
            let id = c.id as u8;
            if id == unlabelled {
                return Err(format!(
                    "class '{}' uses id {id}, which is the unlabelled value; pick another id or set a different unlabelled value",
                    c.name
                ));
            }
            let color = parse_hex_colour(&c.color).ok_or_else(|| {
                format!(
                    "class '{}' has colour '{}'; expected #rrggbb",
                    c.name, c.color
                )
            })?;
            classes.push(ClassInfo {
                id,
                name: c.name,
                color,
            });
        }
        Self::new(classes)
    }

    /// Validates a table built in code.
    pub fn new(classes: Vec<ClassInfo>) -> std::result::Result<Self, String> {
        let table = ClassTable { classes };
        table.validate()?;
        Ok(table)
    }

    /// The table's rules (also applied to tables read from model files, which bypass `new`).
    pub fn validate(&self) -> std::result::Result<(), String> {
        let classes = &self.classes;
        if classes.len() < 2 {
            return Err(format!(
                "the class table has {} class(es); a segmenter needs at least 2 to separate",
                classes.len()
            ));
        }
        if classes.len() > 255 {
            return Err(format!(
                "the class table has {} classes; at most 255 fit in 8-bit label files",
                classes.len()
            ));
        }
        let (mut ids, mut names, mut colours) = (HashSet::new(), HashSet::new(), HashSet::new());
        for c in classes {
            check_class_name(&c.name)?;
            if !ids.insert(c.id) {
                return Err(format!("duplicate class id {}", c.id));
            }
            if !names.insert(c.name.as_str()) {
                return Err(format!("duplicate class name '{}'", c.name));
            }
            if !colours.insert(c.color) {
                return Err(format!(
                    "duplicate colour {} (class '{}'): colour-coded labels would be ambiguous",
                    hex_colour(c.color),
                    c.name
                ));
            }
        }
        Ok(())
    }

    pub fn len(&self) -> usize {
        self.classes.len()
    }

    pub fn is_empty(&self) -> bool {
        self.classes.is_empty()
    }

    pub fn classes(&self) -> &[ClassInfo] {
        &self.classes
    }

    pub fn names(&self) -> Vec<String> {
        self.classes.iter().map(|c| c.name.clone()).collect()
    }

    /// Class index for a label-file id.
    pub fn index_of_id(&self, id: u8) -> Option<usize> {
        self.classes.iter().position(|c| c.id == id)
    }

    /// Class index for a label colour.
    pub fn index_of_colour(&self, rgb: [u8; 3]) -> Option<usize> {
        self.classes.iter().position(|c| c.color == rgb)
    }

    /// Palette for label PNGs: entry `id` holds that class's colour, others black.
    pub fn palette(&self) -> [[u8; 3]; 256] {
        let mut pal = [[0u8; 3]; 256];
        for c in &self.classes {
            pal[c.id as usize] = c.color;
        }
        pal
    }

    /// TOML text in the same format `load` reads (with a comment marking it as grove's own
    /// output, see `output_guard`; names quoted by the TOML serialiser, so a quote in a name
    /// cannot break the file).
    pub fn to_toml(&self) -> String {
        let mut s = format!(
            "# class table {} {}\n\n",
            crate::output_guard::SIGNATURE,
            env!("CARGO_PKG_VERSION")
        );
        for c in &self.classes {
            s += &format!(
                "[[class]]\nid = {}\nname = {}\ncolor = \"{}\"\n\n",
                c.id,
                toml::Value::String(c.name.clone()),
                hex_colour(c.color)
            );
        }
        s
    }

    /// Writes the table to `path` (atomically), in the format `load` reads.
    pub fn save(&self, path: &Path) -> Result<()> {
        crate::imageio::write_atomic(path, self.to_toml().as_bytes())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const OK: &str = "[[class]]\nid = 0\nname = \"soil\"\ncolor = \"#8a6a4a\"\n[[class]]\nid = 3\nname = \"crop\"\ncolor = \"#22aa22\"\n";

    #[test]
    fn parses_and_round_trips() {
        let t = ClassTable::parse(OK, 255).unwrap();
        assert_eq!(t.len(), 2);
        assert_eq!(t.index_of_id(3), Some(1));
        assert_eq!(t.index_of_colour([0x8a, 0x6a, 0x4a]), Some(0));
        assert_eq!(ClassTable::parse(&t.to_toml(), 255).unwrap(), t);
    }

    #[test]
    fn rejects_duplicates_and_bad_values() {
        let dup_id = OK.replace("id = 3", "id = 0");
        assert!(ClassTable::parse(&dup_id, 255)
            .unwrap_err()
            .contains("duplicate class id"));
        let dup_name = OK.replace("crop", "soil");
        assert!(ClassTable::parse(&dup_name, 255)
            .unwrap_err()
            .contains("duplicate class name"));
        let bad_colour = OK.replace("#22aa22", "green");
        assert!(ClassTable::parse(&bad_colour, 255)
            .unwrap_err()
            .contains("expected #rrggbb"));
        assert!(ClassTable::parse(OK, 3)
            .unwrap_err()
            .contains("unlabelled value"));
        for bad in [
            "../../../escaped",
            "a/b",
            "a\\\\b",
            "x\\ny",
            "..",
            ".hidden",
            " pad",
        ] {
            let text = OK.replace("\"crop\"", &format!("\"{bad}\""));
            let err = ClassTable::parse(&text, 255).unwrap_err();
            assert!(err.contains("class name"), "{bad:?}: {err}");
        }
        let long = OK.replace("crop", &"c".repeat(65));
        assert!(ClassTable::parse(&long, 255)
            .unwrap_err()
            .contains("longer than 64"));
        let odd = ClassTable::new(vec![
            ClassInfo {
                id: 0,
                name: "a \"quoted\" name".into(),
                color: [1, 2, 3],
            },
            ClassInfo {
                id: 9,
                name: "b".into(),
                color: [4, 5, 6],
            },
        ])
        .unwrap();
        assert_eq!(ClassTable::parse(&odd.to_toml(), 255).unwrap(), odd);
        let one = "[[class]]\nid = 0\nname = \"a\"\ncolor = \"#000000\"\n";
        assert!(ClassTable::parse(one, 255)
            .unwrap_err()
            .contains("at least 2"));
    }
}
