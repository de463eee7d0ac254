//! Input history of the running kernel, answered to history_request.
//!
//! Entries live in memory for the life of the kernel process; a restart
//! starts a fresh history. Every entry carries the session number
//! [`CURRENT_SESSION`] because there is only ever one session per process.
//! Access types follow the messaging protocol's history section: "range"
//! (line numbers, stop exclusive), "tail" (last n) and "search" (glob
//! pattern, optionally unique, last n matches).

use serde_json::{json, Value};

/// Session number reported for every entry of this process.
pub const CURRENT_SESSION: i64 = 1;

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct HistoryEntry {
    /// The execution count the cell ran under.
    pub line: u64,
    pub input: String,
    /// Plain-text form of the cell's value, if it had one.
    pub output: Option<String>,
}

/// What a history_request asks for.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum HistoryQuery {
    Range {
        session: i64,
        start: u64,
        stop: Option<u64>,
    },
    Tail {
        n: Option<usize>,
    },
    Search {
        pattern: String,
        unique: bool,
        n: Option<usize>,
    },
}

impl HistoryQuery {
    /// Read a query from history_request content; `Err` says what is wrong.
    pub fn from_content(content: &Value) -> Result<Self, String> {
        let access = content
            .get("hist_access_type")
            .and_then(Value::as_str)
            .unwrap_or("tail");
        let count = |key: &str| content.get(key).and_then(Value::as_i64);
        let n = count("n").and_then(|n| usize::try_from(n).ok());
        match access {
            "range" => Ok(HistoryQuery::Range {
                session: count("session").unwrap_or(0),
                start: count("start")
                    .and_then(|s| u64::try_from(s).ok())
                    .unwrap_or(0),
                stop: count("stop").and_then(|s| u64::try_from(s).ok()),
            }),
            "tail" => Ok(HistoryQuery::Tail { n }),
            "search" => Ok(HistoryQuery::Search {
                pattern: content
                    .get("pattern")
                    .and_then(Value::as_str)
                    .unwrap_or("*")
                    .to_string(),
                unique: content
                    .get("unique")
                    .and_then(Value::as_bool)
                    .unwrap_or(false),
                n,
            }),
            other => Err(format!(
                "hist_access_type \"{other}\" is not one of \"range\", \"tail\", \"search\""
            )),
        }
    }
}

#[derive(Debug, Default)]
pub struct History {
    entries: Vec<HistoryEntry>,
}

impl History {
    pub fn push(&mut self, line: u64, input: &str, output: Option<String>) {
        self.entries.push(HistoryEntry {
            line,
            input: input.to_string(),
            output,
        });
    }

    pub fn len(&self) -> usize {
        self.entries.len()
    }

    pub fn is_empty(&self) -> bool {
        self.entries.is_empty()
    }

    /// Entries answering `query`, oldest first.
    pub fn query(&self, query: &HistoryQuery) -> Vec<&HistoryEntry> {
        match query {
            HistoryQuery::Range {
                session,
                start,
                stop,
            } => {
                // Session 0 means "this session"; negative ones are earlier
                // sessions, which a fresh process does not have.
                if *session != 0 && *session != CURRENT_SESSION {
                    return Vec::new();
                }
                self.entries
                    .iter()
                    .filter(|entry| {
                        entry.line >= *start && stop.is_none_or(|stop| entry.line < stop)
                    })
                    .collect()
            }
            HistoryQuery::Tail { n } => last(self.entries.iter().collect(), *n),
            HistoryQuery::Search { pattern, unique, n } => {
                let matching: Vec<&HistoryEntry> = self
                    .entries
                    .iter()
                    .filter(|entry| glob_match(pattern, &entry.input))
                    .collect();
                let matching = if *unique {
                    // Keep the most recent of each distinct input.
                    let mut kept: Vec<&HistoryEntry> = Vec::new();
                    for entry in matching.into_iter().rev() {
                        if !kept.iter().any(|seen| seen.input == entry.input) {
                            kept.push(entry);
                        }
                    }
                    kept.reverse();
                    kept
                } else {
                    matching
                };
                last(matching, *n)
            }
        }
    }

    /// The `history` array of a history_reply: `[session, line, input]`, or
    /// `[session, line, [input, output]]` when `output` is asked for.
    pub fn reply_entries(&self, query: &HistoryQuery, output: bool) -> Value {
        let rows: Vec<Value> = self
            .query(query)
            .into_iter()
            .map(|entry| {
                if output {
                    json!([CURRENT_SESSION, entry.line, [entry.input, entry.output]])
                } else {
                    json!([CURRENT_SESSION, entry.line, entry.input])
                }
            })
            .collect();
        Value::Array(rows)
    }
}

fn last(entries: Vec<&HistoryEntry>, n: Option<usize>) -> Vec<&HistoryEntry> {
    match n {
        Some(n) if n < entries.len() => entries[entries.len() - n..].to_vec(),
        _ => entries,
    }
}

/// Shell-style glob over the whole text: `*` any run, `?` one code point,
/// `[abc]` / `[a-z]` / `[!a]` one of a set (the rules of POSIX fnmatch,
/// without special treatment of "/").
pub fn glob_match(pattern: &str, text: &str) -> bool {
    let pattern: Vec<char> = pattern.chars().collect();
    let text: Vec<char> = text.chars().collect();
    // Iterative matcher with one backtrack point for the latest star.
    let (mut p, mut t) = (0usize, 0usize);
    let mut star: Option<(usize, usize)> = None;
    while t < text.len() {
        if p < pattern.len() {
            match pattern[p] {
                '*' => {
                    star = Some((p, t));
                    p += 1;
                    continue;
                }
                '?' => {
                    p += 1;
                    t += 1;
                    continue;
                }
                '[' => {
                    if let Some((matched, next)) = class_match(&pattern, p, text[t]) {
                        if matched {
                            p = next;
                            t += 1;
                            continue;
                        }
                    } else if text[t] == '[' {
                        // An unclosed "[" stands for itself.
                        p += 1;
                        t += 1;
                        continue;
                    }
                }
                c if c == text[t] => {
                    p += 1;
                    t += 1;
                    continue;
                }
                _ => {}
            }
        }
        match star {
            Some((star_p, star_t)) => {
                p = star_p + 1;
                t = star_t + 1;
                star = Some((star_p, star_t + 1));
            }
            None => return false,
        }
    }
    pattern[p..].iter().all(|&c| c == '*')
}

/// Match `c` against the class starting at `pattern[start] == '['`; returns
/// whether it matched and the index after the closing "]", or `None` when
/// the class is not closed.
fn class_match(pattern: &[char], start: usize, c: char) -> Option<(bool, usize)> {
    let mut i = start + 1;
    let negated = matches!(pattern.get(i), Some('!') | Some('^'));
    if negated {
        i += 1;
    }
    let mut matched = false;
    let mut first = true;
    while i < pattern.len() {
        if pattern[i] == ']' && !first {
            return Some((matched != negated, i + 1));
        }
        first = false;
        if i + 2 < pattern.len() && pattern[i + 1] == '-' && pattern[i + 2] != ']' {
            if pattern[i] <= c && c <= pattern[i + 2] {
                matched = true;
            }
            i += 3;
        } else {
            if pattern[i] == c {
                matched = true;
            }
            i += 1;
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn glob_follows_fnmatch_rules() {
        // Expected values as Python's fnmatch.fnmatchcase gives them.
        assert!(glob_match("1?2*", "1+2+3"));
        assert!(!glob_match("1?2*", "12"));
        assert!(glob_match("*", ""));
        assert!(glob_match("a*b*c", "axxbyyc"));
        assert!(!glob_match("a*b*c", "axxbyy"));
        assert!(glob_match("[a-c]x", "bx"));
        assert!(!glob_match("[!a-c]x", "bx"));
        assert!(glob_match("é?", "éü"));
        assert!(glob_match("[]]", "]"));
        assert!(glob_match("[x", "[x"));
    }

    fn sample() -> History {
        let mut history = History::default();
        history.push(1, "1+2", Some("3".into()));
        history.push(2, "print hi", None);
        history.push(3, "1+2", Some("3".into()));
        history.push(4, "2*5", Some("10".into()));
        history
    }

    fn lines(entries: Vec<&HistoryEntry>) -> Vec<u64> {
        entries.iter().map(|entry| entry.line).collect()
    }

    #[test]
    fn tail_range_and_search() {
        let history = sample();
        assert_eq!(
            lines(history.query(&HistoryQuery::Tail { n: Some(2) })),
            [3, 4]
        );
        assert_eq!(
            lines(history.query(&HistoryQuery::Tail { n: None })),
            [1, 2, 3, 4]
        );
        let range = HistoryQuery::Range {
            session: CURRENT_SESSION,
            start: 2,
            stop: Some(4),
        };
        assert_eq!(lines(history.query(&range)), [2, 3]);
        let earlier = HistoryQuery::Range {
            session: -1,
            start: 0,
            stop: None,
        };
        assert!(history.query(&earlier).is_empty());
        let search = |unique, n| HistoryQuery::Search {
            pattern: "1?2*".into(),
            unique,
            n,
        };
        assert_eq!(lines(history.query(&search(false, None))), [1, 3]);
        assert_eq!(lines(history.query(&search(true, None))), [3]);
        assert_eq!(lines(history.query(&search(false, Some(1)))), [3]);
    }

    #[test]
    fn reply_rows_have_three_items() {
        let history = sample();
        let rows = history.reply_entries(&HistoryQuery::Tail { n: Some(1) }, true);
        assert_eq!(rows, json!([[1, 4, ["2*5", "10"]]]));
        let rows = history.reply_entries(&HistoryQuery::Tail { n: Some(1) }, false);
        assert_eq!(rows, json!([[1, 4, "2*5"]]));
    }

    #[test]
    fn query_from_content_reports_unknown_access() {
        let bad = json!({"hist_access_type": "everything"});
        assert!(HistoryQuery::from_content(&bad)
            .unwrap_err()
            .contains("range"));
        let tail = json!({"hist_access_type": "tail", "n": 3});
        assert_eq!(
            HistoryQuery::from_content(&tail),
            Ok(HistoryQuery::Tail { n: Some(3) })
        );
    }
}
