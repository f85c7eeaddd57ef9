//! The dataset as the page sees it: the image list with per-image progress, the pyramid
//! tiles, label maps in and out, and the class table. Every file is found through the
//! dataset's own listing and checked to resolve inside DATA before it is read or written.

use std::path::PathBuf;

use serde_json::{json, Value};

use super::http::{Reply, Req};
use super::security::{inside, valid_name};
use super::{rle, tiles, Workspace};
use crate::dataset::classes::{check_class_name, hex_colour, parse_hex_colour};
use crate::dataset::labels::read_labels;
use crate::dataset::save::{label_path, label_version, save_class_table, save_labels, SaveOutcome};
use crate::dataset::{list_images, stem_of, ClassInfo, ClassTable, LabelMap, UNLABELLED};
use crate::imageio::probe_image;

/// The image file for `name`, found in the listing of `images/` and resolving inside DATA.
pub fn find_image(ws: &Workspace, name: &str) -> Result<PathBuf, Reply> {
    if !valid_name(name) {
        return Err(Reply::error(400, "invalid image name"));
    }
    let images =
        list_images(&ws.root.join("images")).map_err(|e| Reply::error(500, e.to_string()))?;
    let path = images
        .into_iter()
        .find(|p| stem_of(p) == name)
        .ok_or_else(|| Reply::error(404, format!("no image named '{name}'")))?;
    inside(&ws.root, &path).ok_or_else(|| Reply::error(404, format!("no image named '{name}'")))
}

/// The label file for `name`, if its location resolves inside DATA.
fn label_file(ws: &Workspace, name: &str) -> Result<PathBuf, Reply> {
    let path = label_path(&ws.root, name);
    if let Some(dir) = path.parent() {
        if dir.exists() && inside(&ws.root, dir).is_none() {
            return Err(Reply::error(
                404,
                "labels/ leads outside the dataset folder",
            ));
        }
    }
    if path.symlink_metadata().is_ok() && inside(&ws.root, &path).is_none() {
        return Err(Reply::error(
            404,
            format!("label file of '{name}' leads outside the dataset folder"),
        ));
    }
    Ok(path)
}

fn classes_json(classes: &[ClassInfo]) -> Value {
    Value::Array(
        classes
            .iter()
            .enumerate()
            .map(|(i, c)| json!({"index": i, "id": c.id, "name": c.name, "color": hex_colour(c.color)}))
            .collect(),
    )
}

/// Everything the page needs to draw its lists: classes, images with their progress,
/// model and training state.
pub fn state(ws: &Workspace) -> Reply {
    let classes = ws.classes.lock().expect("class lock poisoned").clone();
    let table = ClassTable::new(classes.clone()).ok();
    let images = match list_images(&ws.root.join("images")) {
        Ok(v) => v,
        Err(e) => return Reply::error(500, e.to_string()),
    };
    let (ranks, ranked) = ws.jobs.suggestion_ranks();
    let (scores, scores_current) = ws.jobs.image_scores();
    let list: Vec<Value> = images
        .iter()
        .filter(|p| inside(&ws.root, p).is_some())
        .map(|p| {
            let name = stem_of(p);
            let size = probe_image(p).ok().map(|h| [h.width, h.height]);
            let lpath = label_path(&ws.root, &name);
            let counts = table.as_ref().and_then(|t| {
                if !lpath.is_file() || inside(&ws.root, &lpath).is_none() {
                    return None;
                }
                read_labels(&lpath, t, &ws.label_options)
                    .ok()
                    .map(|m| m.class_counts(t.len()))
            });
            json!({
                "name": name,
                "size": size,
                "labelled": counts,
                "score": scores.get(&name),
                "score_current": scores_current,
                "rank": ranks.get(&name),
            })
        })
        .collect();
    Reply::json(
        200,
        &json!({
            "dataset": ws.root.file_name().map(|n| n.to_string_lossy().into_owned()),
            "classes": classes_json(&classes),
            "classes_ready": table.is_some(),
            "unlabelled": UNLABELLED,
            "images": list,
            "ranked": ranked,
            "model": ws.jobs.model_summary(),
            "train": ws.jobs.status_json(),
        }),
    )
}

/// Size, pyramid levels and tile side of an image.
pub fn image_info(ws: &Workspace, name: &str) -> Reply {
    let path = match find_image(ws, name) {
        Ok(p) => p,
        Err(r) => return r,
    };
    match ws.tiles.get(&path) {
        Ok(p) => Reply::json(
            200,
            &json!({
                "name": name,
                "width": p.levels[0].width,
                "height": p.levels[0].height,
                "tile": tiles::TILE,
                "levels": p.levels.iter().map(|l| [l.width, l.height]).collect::<Vec<_>>(),
            }),
        ),
        Err(e) => Reply::error(422, e.to_string()),
    }
}

pub fn tile(ws: &Workspace, name: &str, level: &str, x: &str, y: &str) -> Reply {
    let path = match find_image(ws, name) {
        Ok(p) => p,
        Err(r) => return r,
    };
    let (Ok(level), Ok(x), Ok(y)) = (level.parse(), x.parse(), y.parse()) else {
        return Reply::error(400, "tile coordinates must be numbers");
    };
    match ws.tiles.get(&path) {
        Ok(p) => match p.tile_png(level, x, y) {
            Some(png) => Reply::new(200, "image/png", png),
            None => Reply::error(404, "no such tile"),
        },
        Err(e) => Reply::error(422, e.to_string()),
    }
}

/// The image's labels as runs of class indices (255 = unlabelled), with their version.
pub fn get_labels(ws: &Workspace, name: &str) -> Reply {
    let image = match find_image(ws, name) {
        Ok(p) => p,
        Err(r) => return r,
    };
    let path = match label_file(ws, name) {
        Ok(p) => p,
        Err(r) => return r,
    };
    let header = match probe_image(&image) {
        Ok(h) => h,
        Err(e) => return Reply::error(422, e.to_string()),
    };
    let n = header.width * header.height;
    let (indices, version) = if path.is_file() {
        let table = match ws.table() {
            Ok(t) => t,
            Err(m) => return Reply::error(409, format!("cannot read labels yet: {m}")),
        };
        let version = match label_version(&path) {
            Ok(v) => v,
            Err(e) => return Reply::error(500, e.to_string()),
        };
        match read_labels(&path, &table, &ws.label_options) {
            Ok(m) if (m.width, m.height) == (header.width, header.height) => (m.indices, version),
            Ok(m) => {
                return Reply::error(
                    422,
                    format!(
                        "{}: label size {}x{} differs from image size {}x{}",
                        path.display(),
                        m.width,
                        m.height,
                        header.width,
                        header.height
                    ),
                )
            }
            Err(e) => return Reply::error(422, e.to_string()),
        }
    } else {
        (vec![UNLABELLED; n], "none".to_string())
    };
    Reply::new(200, "application/octet-stream", rle::encode(&indices))
        .with_header("ETag", format!("\"{version}\""))
        .with_header("X-Width", header.width.to_string())
        .with_header("X-Height", header.height.to_string())
}

/// Saves painted labels if the file is still at the version the page loaded (`If-Match`
/// header, or `?base=` for beacons sent while the tab closes); 409 otherwise.
pub fn put_labels(ws: &Workspace, name: &str, req: &Req) -> Reply {
    let image = match find_image(ws, name) {
        Ok(p) => p,
        Err(r) => return r,
    };
    if let Err(r) = label_file(ws, name) {
        return r;
    }
    let table = match ws.table() {
        Ok(t) => t,
        Err(m) => return Reply::error(409, format!("cannot save labels yet: {m}")),
    };
    let header = match probe_image(&image) {
        Ok(h) => h,
        Err(e) => return Reply::error(422, e.to_string()),
    };
    let expected = req
        .header("if-match")
        .map(|v| v.trim_matches('"').to_string())
        .or_else(|| req.query("base").map(str::to_string));
    let Some(expected) = expected else {
        return Reply::error(428, "say which version the edit started from (If-Match)");
    };
    let indices = match rle::decode(&req.body, header.width * header.height) {
        Ok(v) => v,
        Err(m) => return Reply::error(400, m),
    };
    if let Some(bad) = indices
        .iter()
        .find(|&&c| c != UNLABELLED && c as usize >= table.len())
    {
        return Reply::error(400, format!("class index {bad} is not in the class table"));
    }
    let map = LabelMap {
        width: header.width,
        height: header.height,
        indices,
    };
    let _guard = ws.save_lock.lock().expect("save lock poisoned");
    match save_labels(
        &ws.root,
        name,
        &map,
        &table,
        &ws.label_options,
        Some(&expected),
    ) {
        Ok(SaveOutcome::Saved(version)) => Reply::json(
            200,
            &json!({"version": version, "labelled": map.class_counts(table.len())}),
        )
        .with_header("ETag", format!("\"{version}\"")),
        Ok(SaveOutcome::Stale { current }) => Reply::json(
            409,
            &json!({
                "error": format!("'{name}' was saved elsewhere (another tab or program) after this page loaded it; nothing was overwritten. Reload the image to see that version, or keep yours to replace it (the other version stays in the history)."),
                "current": current,
            }),
        ),
        Err(e) => Reply::error(500, e.to_string()),
    }
}

/// Replaces the class table with the page's edit: existing classes keep their ids (label
/// files store ids), new ones get the lowest free id; classes cannot be removed, because
/// label files may use their ids. Written to classes.toml once there are two classes.
pub fn put_classes(ws: &Workspace, req: &Req) -> Reply {
    let Ok(body) = serde_json::from_slice::<Value>(&req.body) else {
        return Reply::error(
            400,
            "expected JSON {\"classes\": [{\"id\", \"name\", \"color\"}]}",
        );
    };
    let Some(items) = body.get("classes").and_then(Value::as_array) else {
        return Reply::error(400, "expected JSON {\"classes\": [...]}");
    };
    let mut classes = ws.classes.lock().expect("class lock poisoned");
    let unlabelled = ws.label_options.unlabelled_value;
    let mut next: Vec<ClassInfo> = Vec::with_capacity(items.len());
    for item in items {
        let name = item
            .get("name")
            .and_then(Value::as_str)
            .unwrap_or("")
            .trim()
            .to_string();
        if let Err(m) = check_class_name(&name) {
            return Reply::error(400, m);
        }
        let colour = item.get("color").and_then(Value::as_str).unwrap_or("");
        let Some(color) = parse_hex_colour(colour) else {
            return Reply::error(400, format!("class '{name}': colour must be #rrggbb"));
        };
        let id = match item.get("id").and_then(Value::as_u64) {
            Some(id) if classes.iter().any(|c| c.id as u64 == id) => id as u8,
            Some(id) => return Reply::error(400, format!("there is no class with id {id}")),
            None => {
                let Some(free) = (0..=255u8).find(|i| {
                    *i != unlabelled
                        && !classes.iter().chain(&next).any(|c| c.id == *i)
                        && !items
                            .iter()
                            .any(|o| o.get("id").and_then(Value::as_u64) == Some(*i as u64))
                }) else {
                    return Reply::error(400, "no free class id left");
                };
                free
            }
        };
        next.push(ClassInfo { id, name, color });
    }
    if let Some(lost) = classes.iter().find(|c| !next.iter().any(|n| n.id == c.id)) {
        return Reply::error(
            400,
            format!(
                "class '{}' cannot be removed: label files may use its id {}",
                lost.name, lost.id
            ),
        );
    }
    // Existing classes keep their order (class index = table order, which label maps in open
    // pages and trained models rely on); new ones go at the end.
    let mut ordered: Vec<ClassInfo> = classes
        .iter()
        .map(|c| {
            next.iter()
                .find(|n| n.id == c.id)
                .cloned()
                .expect("checked above")
        })
        .collect();
    ordered.extend(
        next.iter()
            .filter(|n| !classes.iter().any(|c| c.id == n.id))
            .cloned(),
    );
    if ordered.len() >= 2 {
        let table = match ClassTable::new(ordered.clone()) {
            Ok(t) => t,
            Err(m) => return Reply::error(400, m),
        };
        if let Err(e) = save_class_table(&ws.root, &table) {
            return Reply::error(500, e.to_string());
        }
    }
    *classes = ordered;
    Reply::json(
        200,
        &json!({"classes": classes_json(&classes), "classes_ready": classes.len() >= 2}),
    )
}
