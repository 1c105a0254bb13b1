//! Technicians' notes: hostile kinds, tags, times and bodies posted to ombrask-ob3.

use super::*;

pub(crate) const NOTE_KINDS: &[&str] = &[
    "checked",
    "recalibrated",
    "replaced",
    "",
    "CHECKED",
    " checked ",
    "broken",
    "checked\u{0}",
];

pub(crate) const NOTE_TAGS: &[&str] = &[
    "OB2-FI-101",
    "OB2-FI-201",
    "OB2-AI-402",
    "OB2-FI-999",
    "%00",
    "OB2-FI-101%00",
    "..",
    "%FF",
];

#[derive(Debug, Clone)]
pub(crate) struct NoteCase {
    pub(crate) tag: &'static str,
    pub(crate) kind: &'static str,
    pub(crate) text: Text,
    pub(crate) effective_at: Option<&'static str>,
    pub(crate) extra: bool,
    pub(crate) edits: Vec<Edit>,
    pub(crate) media: Option<&'static str>,
}

pub(crate) fn note_case() -> impl Strategy<Value = NoteCase> {
    let text = prop_oneof![
        4 => prop::sample::select(vec!["zero checked", "", "\u{0}", "a\u{0}b", "\u{202e}", "\n\t", "Ω😀"])
            .prop_map(Text::Word),
        1 => (
            prop::sample::select(vec!['x', 'é', '😀']),
            prop::sample::select(vec![4_000usize, 4_001, 100_000]),
        )
            .prop_map(|(c, n)| Text::Repeat(c, n)),
    ];
    (
        prop_oneof![4 => prop::sample::select(&NOTE_TAGS[..3]), 1 => prop::sample::select(NOTE_TAGS)],
        prop_oneof![4 => prop::sample::select(&NOTE_KINDS[..3]), 1 => prop::sample::select(NOTE_KINDS)],
        text,
        prop_oneof![2 => Just(None), 3 => prop::sample::select(TIMES).prop_map(Some)],
        prop::bool::weighted(0.1),
        prop_oneof![4 => Just(Vec::new()), 1 => prop::collection::vec(edit(), 1..=2)],
        prop_oneof![
            12 => Just(Some("application/json")),
            1 => prop::sample::select(vec![None, Some("text/plain"), Some("application/json; charset=utf-8"), Some("text/csv")]),
        ],
    )
        .prop_map(|(tag, kind, text, effective_at, extra, edits, media)| NoteCase {
            tag,
            kind,
            text,
            effective_at,
            extra,
            edits,
            media,
        })
}

impl NoteCase {
    pub(crate) fn body(&self) -> Vec<u8> {
        let mut note = json!({"kind": self.kind, "text": self.text.render()});
        if let Some(t) = self.effective_at {
            // The times are written for URLs; in JSON they are plain text.
            note["effective_at"] = json!(t.replace("%2B", "+"));
        }
        if self.extra {
            note["by"] = json!("night shift");
        }
        let mut body = note.to_string().into_bytes();
        for e in &self.edits {
            e.apply(&mut body);
        }
        body
    }

    /// The status the contract promises, when the case is clean enough to say.
    pub(crate) fn expected(&self) -> Option<u16> {
        // A dot segment is resolved away by the client: no route has the path left.
        if self.tag == ".." {
            return Some(404);
        }
        if !self.edits.is_empty() || self.media != Some("application/json") {
            return None;
        }
        let text = self.text.render();
        let time_ok = self
            .effective_at
            .is_none_or(|t| decoded_time(t, false).is_some());
        let refused = self.extra
            || !["checked", "recalibrated", "replaced"].contains(&self.kind.trim())
            || text.chars().count() > 4_000
            || text.contains('\0')
            || !time_ok;
        if refused {
            Some(400)
        } else if NOTE_TAGS[..3].contains(&self.tag) {
            Some(201)
        } else {
            Some(404)
        }
    }
}

pub(crate) async fn notes(fx: &mut Fixture, count: usize) {
    let mut family = Family::draw("notes", count, note_case());
    while let Some((i, case)) = family.next() {
        let body = case.body();
        let what = family.describe(i, &case, &body);
        let known = NOTE_TAGS[..3].contains(&case.tag);
        let notes_of = |detail: Value| detail["notes"].as_array().cloned().unwrap_or_default();
        let before = if known {
            notes_of(
                fx.get(
                    &format!("/api/v1/plants/{SCRATCH}/meters/{}", case.tag),
                    &[],
                )
                .await,
            )
        } else {
            Vec::new()
        };
        let oversize = body.len() > MAX_BODY;
        let a = fx
            .post_note(SCRATCH, case.tag, case.media, body, &what)
            .await;
        check(&a, &what);
        if oversize {
            expect(&a, &[413], &what);
        } else if let Some(want) = case.expected() {
            expect(&a, &[want], &what);
        }
        if known {
            let after = notes_of(
                fx.get(
                    &format!("/api/v1/plants/{SCRATCH}/meters/{}", case.tag),
                    &[],
                )
                .await,
            );
            if a.status == 201 {
                // Notes are listed by when they took effect: the new one may come anywhere.
                assert_eq!(after.len(), before.len() + 1, "{what}");
                assert!(
                    before.iter().all(|n| after.contains(n)),
                    "{what}: {after:?}"
                );
                assert!(
                    after.iter().any(|n| n["id"] == a.json()["id"]),
                    "{what}: {after:?}"
                );
            } else {
                assert_eq!(after, before, "{what}: a refused note changed the notes");
            }
        }
        family.count(a.status);
    }
    family.done();
}
