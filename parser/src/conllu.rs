//! Reading and writing CoNLL-U, the Universal Dependencies treebank format
//! (<https://universaldependencies.org/format.html>).
//!
//! Every line of a valid file is kept — comments, multiword-token ranges (`3-4`) and empty nodes
//! (`5.1`) included — so writing a document back gives the same bytes. Only the basic words
//! (integer IDs) take part in parsing; [`Sentence::words`] yields those.
//!
//! Errors name the file, the 1-based line and the 1-based column (the tab-separated field, 1 = ID
//! … 10 = MISC). Strict reading ([`read_str`]) stops at the first error; lenient reading
//! ([`read_str_lenient`]) skips each broken sentence, keeps the rest, and reports every problem.
//!
//! What is checked: ten fields per line, no empty field, IDs in sequence (ranges and empty nodes
//! where they belong), HEAD a number within the sentence (or `_` for unannotated text, for every
//! word of the sentence), no cycles, exactly one word attached to the root, LF line endings.
//! A file may end without the final blank line (real treebanks do); the writer reproduces however
//! the file ended.

use std::fmt;

/// Field names, for error messages (index = column − 1).
pub const FIELD_NAMES: [&str; 10] = [
    "ID", "FORM", "LEMMA", "UPOS", "XPOS", "FEATS", "HEAD", "DEPREL", "DEPS", "MISC",
];

const HEAD_COLUMN: usize = 7;

/// A basic word (integer ID).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Word {
    pub id: usize,
    pub form: String,
    pub lemma: String,
    pub upos: String,
    pub xpos: String,
    pub feats: String,
    /// `None` when HEAD is `_` (text to be parsed).
    pub head: Option<usize>,
    pub deprel: String,
    pub deps: String,
    pub misc: String,
}

impl Word {
    /// A word with only a form; every other field `_`.
    pub fn bare(id: usize, form: impl Into<String>) -> Word {
        let blank = || "_".to_string();
        Word {
            id,
            form: form.into(),
            lemma: blank(),
            upos: blank(),
            xpos: blank(),
            feats: blank(),
            head: None,
            deprel: blank(),
            deps: blank(),
            misc: blank(),
        }
    }

    /// FEATS as (name, value) pairs in file order; empty for `_`.
    pub fn feature_pairs(&self) -> Vec<(&str, &str)> {
        if self.feats == "_" {
            return Vec::new();
        }
        self.feats
            .split('|')
            .map(|pair| pair.split_once('=').unwrap_or((pair, "")))
            .collect()
    }
}

/// One line of a sentence.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Item {
    /// A comment line, kept whole (including the leading `#`).
    Comment(String),
    Word(Word),
    /// A multiword-token range line such as `3-4`; fields 2–10 kept as written.
    Range {
        first: usize,
        last: usize,
        fields: Vec<String>,
    },
    /// An empty node such as `5.1`; fields 2–10 kept as written.
    Empty {
        after: usize,
        index: usize,
        fields: Vec<String>,
    },
}

/// A sentence: its lines in file order.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct Sentence {
    pub items: Vec<Item>,
    /// 1-based line number of the sentence's first line in its file (0 if built in memory).
    pub first_line: usize,
}

impl Sentence {
    /// The basic words in order (IDs 1..=n).
    pub fn words(&self) -> impl Iterator<Item = &Word> {
        self.items.iter().filter_map(|item| match item {
            Item::Word(word) => Some(word),
            _ => None,
        })
    }

    /// Mutable access to the basic words.
    pub fn words_mut(&mut self) -> impl Iterator<Item = &mut Word> {
        self.items.iter_mut().filter_map(|item| match item {
            Item::Word(word) => Some(word),
            _ => None,
        })
    }

    /// Number of basic words.
    pub fn len(&self) -> usize {
        self.words().count()
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Heads as `heads[m]` for `m` in `1..=n` (`heads[0] = 0`), if every word has one.
    pub fn heads(&self) -> Option<Vec<usize>> {
        let mut heads = vec![0];
        for word in self.words() {
            heads.push(word.head?);
        }
        Some(heads)
    }

    /// Builds a sentence from forms only (IDs 1..=n, other fields `_`).
    pub fn from_forms<S: Into<String>>(forms: impl IntoIterator<Item = S>) -> Sentence {
        let items = forms
            .into_iter()
            .enumerate()
            .map(|(i, form)| Item::Word(Word::bare(i + 1, form)))
            .collect();
        Sentence {
            items,
            first_line: 0,
        }
    }

    /// Writes the sentence's lines followed by the blank line that ends it.
    pub fn write_to(&self, out: &mut String) {
        for item in &self.items {
            match item {
                Item::Comment(text) => out.push_str(text),
                Item::Word(w) => {
                    let head = w.head.map_or_else(|| "_".to_string(), |h| h.to_string());
                    let fields: [&str; 10] = [
                        &w.id.to_string(),
                        &w.form,
                        &w.lemma,
                        &w.upos,
                        &w.xpos,
                        &w.feats,
                        &head,
                        &w.deprel,
                        &w.deps,
                        &w.misc,
                    ];
                    out.push_str(&fields.join("\t"));
                }
                Item::Range {
                    first,
                    last,
                    fields,
                } => {
                    out.push_str(&format!("{first}-{last}\t{}", fields.join("\t")));
                }
                Item::Empty {
                    after,
                    index,
                    fields,
                } => {
                    out.push_str(&format!("{after}.{index}\t{}", fields.join("\t")));
                }
            }
            out.push('\n');
        }
        out.push('\n');
    }
}

/// How the file ended after its last sentence, so that writing it back gives the same bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Ending {
    /// The last sentence was followed by a blank line (the format's rule).
    #[default]
    BlankLine,
    /// The last line ended with a newline but no blank line followed.
    Newline,
    /// The last line had no newline at all.
    NoNewline,
}

/// A CoNLL-U file: its sentences and how it ended.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct Document {
    pub sentences: Vec<Sentence>,
    pub ending: Ending,
}

impl Document {
    /// The document as CoNLL-U text; byte-identical to the input for a file read without errors.
    pub fn to_conllu(&self) -> String {
        let mut out = String::new();
        for sentence in &self.sentences {
            sentence.write_to(&mut out);
        }
        if !self.sentences.is_empty() {
            match self.ending {
                Ending::BlankLine => {}
                Ending::Newline => {
                    out.pop();
                }
                Ending::NoNewline => {
                    out.pop();
                    out.pop();
                }
            }
        }
        out
    }
}

/// What is wrong, without the location.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Problem {
    ColumnCount { found: usize },
    EmptyField,
    CarriageReturn,
    BlankLineWithSpaces,
    EmptySentence,
    BadId { text: String },
    IdSequence { expected: String, found: String },
    BadHead { text: String },
    HeadOutOfRange { head: usize, words: usize },
    MissingHead,
    SelfHead { id: usize },
    Cycle { ids: Vec<usize> },
    NoRoot,
    SeveralRoots { ids: Vec<usize> },
    InvalidUtf8,
}

impl fmt::Display for Problem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Problem::ColumnCount { found } => {
                write!(f, "expected 10 tab-separated fields, found {found}")
            }
            Problem::EmptyField => write!(f, "empty field (use _ for a missing value)"),
            Problem::CarriageReturn => {
                write!(
                    f,
                    "line ends with a carriage return; CoNLL-U lines end with LF only"
                )
            }
            Problem::BlankLineWithSpaces => {
                write!(
                    f,
                    "line holds only white space; sentence breaks must be empty lines"
                )
            }
            Problem::EmptySentence => {
                write!(
                    f,
                    "empty sentence (two blank lines in a row, or a blank first line)"
                )
            }
            Problem::BadId { text } => {
                write!(
                    f,
                    "ID {text:?} is not a word ID (N), a range (N-M) or an empty node (N.K)"
                )
            }
            Problem::IdSequence { expected, found } => {
                write!(f, "ID {found} out of sequence; expected {expected}")
            }
            Problem::BadHead { text } => {
                write!(
                    f,
                    "HEAD {text:?} is not a word ID (a non-negative integer) or _"
                )
            }
            Problem::HeadOutOfRange { head, words } => {
                write!(
                    f,
                    "HEAD {head} is out of range; the sentence has {words} words"
                )
            }
            Problem::MissingHead => {
                write!(f, "HEAD is _ but other words of the sentence have a head")
            }
            Problem::SelfHead { id } => write!(f, "word {id} is its own head"),
            Problem::Cycle { ids } => {
                let list: Vec<String> = ids.iter().map(|i| i.to_string()).collect();
                write!(f, "the heads of words {} form a cycle", list.join(" → "))
            }
            Problem::NoRoot => write!(f, "no word has HEAD 0 (the sentence has no root)"),
            Problem::SeveralRoots { ids } => {
                let list: Vec<String> = ids.iter().map(|i| i.to_string()).collect();
                write!(
                    f,
                    "words {} all have HEAD 0; a sentence has exactly one root",
                    list.join(", ")
                )
            }
            Problem::InvalidUtf8 => write!(f, "invalid UTF-8"),
        }
    }
}

/// A problem at a place in a file.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{file}:{line}:{column}: {}{problem}", field_label(*.column))]
pub struct ConlluError {
    pub file: String,
    /// 1-based line number.
    pub line: usize,
    /// 1-based column: the tab-separated field (1 = ID … 10 = MISC; 11 = past the last field).
    pub column: usize,
    pub problem: Problem,
}

fn field_label(column: usize) -> String {
    match FIELD_NAMES.get(column.wrapping_sub(1)) {
        Some(name) => format!("{name}: "),
        None => String::new(),
    }
}

/// Everything a lenient read found.
#[derive(Debug, Clone, Default)]
pub struct LenientRead {
    pub document: Document,
    pub errors: Vec<ConlluError>,
}

/// Reads a whole file strictly: the first problem is the error.
pub fn read_str(file: &str, text: &str) -> Result<Document, ConlluError> {
    let mut read = Reader::new(file, text, false).run();
    match read.errors.is_empty() {
        true => Ok(read.document),
        false => Err(read.errors.swap_remove(0)),
    }
}

/// Reads what it can: broken sentences are skipped and each problem is reported.
pub fn read_str_lenient(file: &str, text: &str) -> LenientRead {
    Reader::new(file, text, true).run()
}

/// Reads bytes, reporting invalid UTF-8 with its line and column (counted in bytes).
pub fn read_bytes(file: &str, bytes: &[u8]) -> Result<Document, ConlluError> {
    let text = utf8(file, bytes)?;
    read_str(file, text)
}

/// Like [`read_bytes`] but lenient; invalid UTF-8 is still fatal (positions would be unreliable).
pub fn read_bytes_lenient(file: &str, bytes: &[u8]) -> Result<LenientRead, ConlluError> {
    let text = utf8(file, bytes)?;
    Ok(read_str_lenient(file, text))
}

fn utf8<'a>(file: &str, bytes: &'a [u8]) -> Result<&'a str, ConlluError> {
    std::str::from_utf8(bytes).map_err(|e| {
        let good = &bytes[..e.valid_up_to()];
        let line = good.iter().filter(|&&b| b == b'\n').count() + 1;
        let line_start = good.iter().rposition(|&b| b == b'\n').map_or(0, |p| p + 1);
        let column = good[line_start..].iter().filter(|&&b| b == b'\t').count() + 1;
        ConlluError {
            file: file.to_string(),
            line,
            column,
            problem: Problem::InvalidUtf8,
        }
    })
}

struct Reader<'a> {
    file: &'a str,
    text: &'a str,
    lenient: bool,
    errors: Vec<ConlluError>,
}

/// A sentence being read, with the line of each word for later errors.
#[derive(Default)]
struct Pending {
    sentence: Sentence,
    word_lines: Vec<usize>,
    broken: bool,
    next_word: usize,
    range_end: usize,
    last_empty: (usize, usize),
}

impl<'a> Reader<'a> {
    fn new(file: &'a str, text: &'a str, lenient: bool) -> Self {
        Reader {
            file,
            text,
            lenient,
            errors: Vec::new(),
        }
    }

    fn error(&mut self, line: usize, column: usize, problem: Problem) {
        self.errors.push(ConlluError {
            file: self.file.to_string(),
            line,
            column,
            problem,
        });
    }

    fn run(mut self) -> LenientRead {
        let mut document = Document::default();
        let mut pending: Option<Pending> = None;
        let text = self.text;
        let mut lines = text.split('\n').enumerate().peekable();
        while let Some((index, raw)) = lines.next() {
            let line_number = index + 1;
            let is_last = lines.peek().is_none();
            if is_last && raw.is_empty() {
                // The text ended with '\n': nothing after it.
                break;
            }
            if !self.lenient && !self.errors.is_empty() {
                break;
            }
            let line = match raw.strip_suffix('\r') {
                Some(stripped) => {
                    self.error(line_number, 1, Problem::CarriageReturn);
                    if let Some(p) = pending.as_mut() {
                        p.broken = true;
                    }
                    stripped
                }
                None => raw,
            };
            if line.is_empty() {
                match pending.take() {
                    Some(p) => self.finish(p, &mut document),
                    None => self.error(line_number, 1, Problem::EmptySentence),
                }
                continue;
            }
            let p = pending.get_or_insert_with(|| Pending {
                sentence: Sentence {
                    items: Vec::new(),
                    first_line: line_number,
                },
                next_word: 1,
                ..Pending::default()
            });
            if p.broken {
                continue;
            }
            if line.trim().is_empty() {
                p.broken = true;
                self.error(line_number, 1, Problem::BlankLineWithSpaces);
                continue;
            }
            if line.starts_with('#') {
                p.sentence.items.push(Item::Comment(line.to_string()));
                continue;
            }
            if let Err((column, problem)) = Self::token_line(p, line, line_number) {
                p.broken = true;
                self.error(line_number, column, problem);
            }
        }
        if let Some(p) = pending.take() {
            self.finish(p, &mut document);
        }
        // How did the text end?
        document.ending = if text.ends_with("\n\n") || text.is_empty() {
            Ending::BlankLine
        } else if text.ends_with('\n') {
            Ending::Newline
        } else {
            Ending::NoNewline
        };
        LenientRead {
            document,
            errors: self.errors,
        }
    }

    /// Parses one token line into `p`.
    fn token_line(p: &mut Pending, line: &str, line_number: usize) -> Result<(), (usize, Problem)> {
        let fields: Vec<&str> = line.split('\t').collect();
        if fields.len() != 10 {
            let column = if fields.len() < 10 {
                fields.len() + 1
            } else {
                11
            };
            return Err((
                column,
                Problem::ColumnCount {
                    found: fields.len(),
                },
            ));
        }
        if let Some(empty) = fields.iter().position(|f| f.is_empty()) {
            return Err((empty + 1, Problem::EmptyField));
        }
        let id = fields[0];
        let rest = || {
            fields[1..]
                .iter()
                .map(|s| s.to_string())
                .collect::<Vec<_>>()
        };
        if let Some((first, last)) = id.split_once('-') {
            let (first, last) = match (parse_index(first), parse_index(last)) {
                (Some(a), Some(b)) if a >= 1 && b > a => (a, b),
                _ => {
                    return Err((
                        1,
                        Problem::BadId {
                            text: id.to_string(),
                        },
                    ));
                }
            };
            if first != p.next_word || first <= p.range_end {
                return Err((
                    1,
                    Problem::IdSequence {
                        expected: format!("a range starting at {}", p.next_word),
                        found: id.to_string(),
                    },
                ));
            }
            p.range_end = last;
            p.sentence.items.push(Item::Range {
                first,
                last,
                fields: rest(),
            });
            return Ok(());
        }
        if let Some((after, index)) = id.split_once('.') {
            let (after, index) = match (parse_index(after), parse_index(index)) {
                (Some(a), Some(k)) if k >= 1 => (a, k),
                _ => {
                    return Err((
                        1,
                        Problem::BadId {
                            text: id.to_string(),
                        },
                    ));
                }
            };
            let current = p.next_word - 1;
            let expected_index = if p.last_empty.0 == current && current_has_empty(p) {
                p.last_empty.1 + 1
            } else {
                1
            };
            if after != current || index != expected_index {
                return Err((
                    1,
                    Problem::IdSequence {
                        expected: format!("{current}.{expected_index} or {}", p.next_word),
                        found: id.to_string(),
                    },
                ));
            }
            p.last_empty = (after, index);
            p.sentence.items.push(Item::Empty {
                after,
                index,
                fields: rest(),
            });
            return Ok(());
        }
        let Some(number) = parse_index(id) else {
            return Err((
                1,
                Problem::BadId {
                    text: id.to_string(),
                },
            ));
        };
        if number != p.next_word {
            return Err((
                1,
                Problem::IdSequence {
                    expected: p.next_word.to_string(),
                    found: id.to_string(),
                },
            ));
        }
        let head = match fields[6] {
            "_" => None,
            text => match parse_index(text) {
                Some(h) => Some(h),
                None => {
                    return Err((
                        HEAD_COLUMN,
                        Problem::BadHead {
                            text: text.to_string(),
                        },
                    ));
                }
            },
        };
        p.next_word += 1;
        p.last_empty = (usize::MAX, 0);
        p.word_lines.push(line_number);
        p.sentence.items.push(Item::Word(Word {
            id: number,
            form: fields[1].to_string(),
            lemma: fields[2].to_string(),
            upos: fields[3].to_string(),
            xpos: fields[4].to_string(),
            feats: fields[5].to_string(),
            head,
            deprel: fields[7].to_string(),
            deps: fields[8].to_string(),
            misc: fields[9].to_string(),
        }));
        Ok(())
    }

    /// Sentence-level checks (heads in range, one root, no cycle), then keep or drop it.
    fn finish(&mut self, p: Pending, document: &mut Document) {
        if p.broken {
            return;
        }
        let words: Vec<&Word> = p.sentence.words().collect();
        let n = words.len();
        let line_of = |id: usize| p.word_lines[id - 1];
        if n == 0 {
            // Only comments: keep them (a file may carry document-level comments).
            document.sentences.push(p.sentence);
            return;
        }
        if p.range_end >= p.next_word {
            let line = p.sentence.first_line;
            self.error(
                line,
                1,
                Problem::IdSequence {
                    expected: format!("words up to {} (the last range)", p.range_end),
                    found: format!("{} words", n),
                },
            );
            return;
        }
        let annotated = words.iter().filter(|w| w.head.is_some()).count();
        if annotated == 0 {
            document.sentences.push(p.sentence);
            return;
        }
        if annotated < n {
            let missing = words.iter().find(|w| w.head.is_none()).map_or(1, |w| w.id);
            self.error(line_of(missing), HEAD_COLUMN, Problem::MissingHead);
            return;
        }
        let mut heads = vec![0usize; n + 1];
        for w in &words {
            let head = w.head.unwrap_or(0);
            if head > n {
                self.error(
                    line_of(w.id),
                    HEAD_COLUMN,
                    Problem::HeadOutOfRange { head, words: n },
                );
                return;
            }
            if head == w.id {
                self.error(line_of(w.id), HEAD_COLUMN, Problem::SelfHead { id: w.id });
                return;
            }
            heads[w.id] = head;
        }
        match crate::decode::check_tree(&heads) {
            Err(crate::decode::TreeError::Cycle { cycle }) => {
                let first = *cycle.iter().min().unwrap_or(&1);
                self.error(line_of(first), HEAD_COLUMN, Problem::Cycle { ids: cycle });
                return;
            }
            Err(_) => {
                let line = p.word_lines[0];
                self.error(line, HEAD_COLUMN, Problem::NoRoot);
                return;
            }
            Ok(1) => {}
            Ok(_) => {
                let ids: Vec<usize> = (1..=n).filter(|&m| heads[m] == 0).collect();
                self.error(line_of(ids[1]), HEAD_COLUMN, Problem::SeveralRoots { ids });
                return;
            }
        }
        document.sentences.push(p.sentence);
    }
}

fn current_has_empty(p: &Pending) -> bool {
    p.last_empty.0 != usize::MAX
}

/// A canonical non-negative decimal integer (no sign, no leading zeros).
fn parse_index(text: &str) -> Option<usize> {
    let canonical = !text.is_empty()
        && text.bytes().all(|b| b.is_ascii_digit())
        && (text == "0" || !text.starts_with('0'));
    if canonical { text.parse().ok() } else { None }
}
