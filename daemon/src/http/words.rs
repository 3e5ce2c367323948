//! The words people read for the daemon's states, one table for every screen: the board and the frame page
//! (`web/common.js`, `O.STATES`, which a test here keeps equal to this table), `/overview` and the report.
//! Internal codes (`primary`, `armed`) stay in the API and the CSVs; no screen shows them.

/// (state code, word, hint) for every frame state.
pub(crate) const STATE_WORDS: [(&str, &str, &str); 7] = [
    ("ready", "Ready", "ready for the next load"),
    ("armed", "Armed", "next load step armed: put the weights on"),
    ("primary", "Settling", "primary consolidation"),
    ("seating", "Seating", "seating load on"),
    ("idle", "Free", "no test running"),
    ("finished", "Done", "test finished"),
    ("offline", "No signal", "no valid reading"),
];

/// The word for state `code` (the code itself for one this table lacks, which a test forbids).
pub(crate) fn state_word(code: &str) -> &str {
    STATE_WORDS.iter().find(|(c, _, _)| *c == code).map_or(code, |(_, w, _)| w)
}

/// The hint for state `code`.
pub(crate) fn state_hint(code: &str) -> &str {
    STATE_WORDS.iter().find(|(c, _, _)| *c == code).map_or("", |(_, _, h)| h)
}

/// A duration in words for a person: "45 s", "12 min", "3 h 10 min", "2.5 days".
pub(crate) fn span(seconds: f64) -> String {
    let s = seconds.max(0.0);
    if s < 90.0 {
        format!("{s:.0} s")
    } else if s < 5400.0 {
        format!("{:.0} min", s / 60.0)
    } else if s < 172_800.0 {
        let h = (s / 3600.0).floor();
        format!("{h:.0} h {:.0} min", ((s - h * 3600.0) / 60.0).floor())
    } else {
        format!("{:.1} days", s / 86_400.0)
    }
}

/// (field, words) for every field of an engineer's choices: the pages (`web/review.js`, `CHOICE_WORDS`,
/// which a test here keeps equal to this table) and the report say the same.
pub(crate) const CHOICE_WORDS: [(&str, &str); 13] = [
    ("taylor_window_min", "√t straight-line window"),
    ("primary_window_min", "log-t primary tangent window"),
    ("secondary_window_min", "log-t secondary line window"),
    ("d0_mm", "d0"),
    ("d100_mm", "d100"),
    ("t50_min", "t50"),
    ("t90_min", "t90"),
    ("drainage", "drainage"),
    ("virgin_points_kpa", "virgin-line points (Cc)"),
    ("unload_reload_points_kpa", "unload–reload points (Cr)"),
    ("max_curvature_kpa", "point of greatest curvature (σ′p)"),
    ("sigma_p_kpa", "σ′p set directly"),
    ("sigma_v0_kpa", "σ′v0"),
];

/// An engineer's choice (a field of the review's choices) in the words the pages and the report use.
pub(crate) fn choice(field: &str) -> &str {
    CHOICE_WORDS.iter().find(|(f, _)| *f == field).map_or(field, |(_, w)| w)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_dashboard_s_state_words_are_this_table() {
        let js = include_str!("../../../web/common.js");
        for (code, word, hint) in STATE_WORDS {
            let entry = format!("{code}: {{ word: \"{word}\", hint: \"{hint}\"");
            assert!(js.contains(&entry), "web/common.js lacks `{entry}`");
        }
        let every: Vec<&str> = crate::http::metrics::STATES.to_vec();
        let mine: Vec<&str> = STATE_WORDS.iter().map(|(c, _, _)| *c).collect();
        assert_eq!(mine.len(), every.len());
        assert!(every.iter().all(|c| mine.contains(c)), "a state without a word: {every:?}");
    }

    #[test]
    fn the_review_panel_s_choice_words_are_this_table_and_every_choice_has_words() {
        let js = include_str!("../../../web/review.js");
        for (field, words) in CHOICE_WORDS {
            let entry = format!("{field}: \"{words}\"");
            assert!(js.contains(&entry), "web/review.js lacks `{entry}`");
        }
        // Every field the core accepts has words (a new choice without them would show its code).
        use oedolog_core::analysis::{CompressionChoices, Drainage, StepChoices};
        let step = StepChoices {
            taylor_window_min: Some([1.0, 2.0]),
            primary_window_min: Some([1.0, 2.0]),
            secondary_window_min: Some([1.0, 2.0]),
            d0_mm: Some(0.0),
            d100_mm: Some(0.0),
            t50_min: Some(1.0),
            t90_min: Some(1.0),
            drainage: Some(Drainage::Double),
        };
        let curve = CompressionChoices {
            virgin_points_kpa: Some(vec![]),
            unload_reload_points_kpa: Some(vec![]),
            max_curvature_kpa: Some(1.0),
            sigma_p_kpa: Some(1.0),
            sigma_v0_kpa: Some(1.0),
        };
        let (step, curve) = (serde_json::to_value(step).unwrap(), serde_json::to_value(curve).unwrap());
        let fields: Vec<&String> = step.as_object().unwrap().keys().chain(curve.as_object().unwrap().keys()).collect();
        assert_eq!(fields.len(), CHOICE_WORDS.len(), "{fields:?}");
        for field in fields {
            assert!(CHOICE_WORDS.iter().any(|(f, _)| f == field), "no words for the choice `{field}`");
        }
    }

    #[test]
    fn spans_read_as_a_person_says_them() {
        assert_eq!(span(42.0), "42 s");
        assert_eq!(span(720.0), "12 min");
        assert_eq!(span(11_400.0), "3 h 10 min");
        assert_eq!(span(216_000.0), "2.5 days");
    }
}
