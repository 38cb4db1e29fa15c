//! CoNLL-U reading: each malformed input gets its precise error (file, line, column, problem);
//! valid input with comments, multiword ranges and empty nodes is written back byte for byte.
//! The format rules are those of the Universal Dependencies CoNLL-U specification
//! (universaldependencies.org/format.html). The round trip of real files and the comparison with
//! the PyPI `conllu` package run in `tests/run.sh` on the Turkish treebank.

use arcwright_parser::conllu::{self, Problem};

/// A word line with the given ID and HEAD.
fn word(id: &str, head: &str) -> String {
    format!("{id}\tw{id}\t_\tNOUN\t_\t_\t{head}\tdep\t_\t_\n")
}

/// Expected error: (line, column, text the message must contain).
fn check(input: &str, expected: (usize, usize, &str)) {
    let error = conllu::read_str("case.conllu", input).expect_err("input should be rejected");
    let message = error.to_string();
    assert_eq!(
        (error.line, error.column),
        (expected.0, expected.1),
        "{message}"
    );
    assert!(
        message.starts_with(&format!("case.conllu:{}:{}: ", expected.0, expected.1)),
        "{message}"
    );
    assert!(
        message.contains(expected.2),
        "message {message:?} lacks {:?}",
        expected.2
    );
}

#[test]
fn malformed_files_get_precise_errors() {
    let good_tail = word("2", "1");
    let cases: Vec<(String, (usize, usize, &str))> = vec![
        // wrong column count: 9 fields, then 11
        (
            "1\ta\t_\tX\t_\t_\t0\troot\t_\n".into(),
            (1, 10, "expected 10 tab-separated fields, found 9"),
        ),
        (
            "1\ta\t_\tX\t_\t_\t0\troot\t_\t_\textra\n".into(),
            (1, 11, "found 11"),
        ),
        // empty field
        (
            "1\ta\t\tX\t_\t_\t0\troot\t_\t_\n".into(),
            (1, 3, "LEMMA: empty field"),
        ),
        // bad ID sequence
        (
            format!("# c\n{}{}", word("1", "0"), word("3", "1")),
            (3, 1, "ID 3 out of sequence; expected 2"),
        ),
        (word("0", "0"), (1, 1, "expected 1")),
        (word("x1", "0"), (1, 1, "ID \"x1\" is not a word ID")),
        (word("01", "0"), (1, 1, "not a word ID")),
        // non-numeric and out-of-range head
        (
            format!("{}{}", word("1", "0"), word("2", "one")),
            (2, 7, "HEAD: HEAD \"one\" is not a word ID"),
        ),
        (
            format!("{}{}", word("1", "0"), word("2", "-1")),
            (2, 7, "not a word ID"),
        ),
        (
            format!("{}{}", word("1", "0"), word("2", "5")),
            (2, 7, "HEAD 5 is out of range; the sentence has 2 words"),
        ),
        // cycle, self-loop, no root, several roots
        (
            format!("{}{}{}", word("1", "0"), word("2", "3"), word("3", "2")),
            (2, 7, "words 2 → 3 form a cycle"),
        ),
        (
            format!("{}{}", word("1", "0"), word("2", "2")),
            (2, 7, "word 2 is its own head"),
        ),
        (
            format!("{}{}", word("1", "0"), word("2", "0")),
            (2, 7, "words 1, 2 all have HEAD 0"),
        ),
        (
            format!("{}{}", word("1", "0"), word("2", "_")),
            (2, 7, "HEAD is _ but other words"),
        ),
        // line endings and blank lines
        (
            "1\ta\t_\tX\t_\t_\t0\troot\t_\t_\r\n".to_string(),
            (1, 1, "carriage return"),
        ),
        (format!("\n{}", word("1", "0")), (1, 1, "empty sentence")),
        (
            format!("{}\n\n{}", word("1", "0"), word("1", "0")),
            (3, 1, "empty sentence"),
        ),
        (
            format!("{} \n{good_tail}", word("1", "0")),
            (2, 1, "only white space"),
        ),
        // ranges and empty nodes out of place
        (
            format!("2-3\tab\t_\t_\t_\t_\t_\t_\t_\t_\n{}", word("1", "0")),
            (1, 1, "a range starting at 1"),
        ),
        (
            format!("{}1.2\te\t_\t_\t_\t_\t_\t_\t_\t_\n", word("1", "0")),
            (2, 1, "expected 1.1 or 2"),
        ),
        (
            format!("1-0\tab\t_\t_\t_\t_\t_\t_\t_\t_\n{}", word("1", "0")),
            (1, 1, "not a word ID"),
        ),
    ];
    for (input, expected) in &cases {
        check(input, *expected);
    }
}

#[test]
fn invalid_utf8_names_line_and_column() {
    let mut bytes = word("1", "0").into_bytes();
    bytes.extend_from_slice(b"2\tw\xff\t_\tX\t_\t_\t1\tdep\t_\t_\n");
    let error = conllu::read_bytes("bytes.conllu", &bytes).expect_err("invalid UTF-8");
    assert_eq!(
        (error.line, error.column, error.problem),
        (2, 2, Problem::InvalidUtf8)
    );
}

#[test]
fn lenient_reading_keeps_good_sentences_and_reports_each_bad_one() {
    let text = format!(
        "{}\n{}{}\n{}{}\n{}",
        word("1", "0"),
        word("1", "0"),
        word("3", "1"), // bad sequence: sentence 2 dropped
        word("1", "0"),
        word("2", "9"), // out-of-range head: sentence 3 dropped
        word("1", "0"),
    );
    let read = conllu::read_str_lenient("mixed.conllu", &text);
    assert_eq!(read.document.sentences.len(), 2);
    let places: Vec<(usize, usize)> = read.errors.iter().map(|e| (e.line, e.column)).collect();
    assert_eq!(places, vec![(4, 1), (7, 7)]);
    assert!(conllu::read_str("mixed.conllu", &text).is_err());
}

#[test]
fn valid_files_are_written_back_byte_for_byte() {
    let ranges_and_empty_nodes = concat!(
        "# sent_id = demo-1\n",
        "# text = abc de\n",
        "1-2\tabc\t_\t_\t_\t_\t_\t_\t_\t_\n",
        "1\tab\tab\tVERB\t_\tMood=Ind|Tense=Past\t0\troot\t0:root\t_\n",
        "2\tc\tc\tPRON\t_\t_\t1\tobj\t1:obj\tSpaceAfter=No\n",
        "2.1\tx\tx\tVERB\t_\t_\t_\t_\t1:conj\t_\n",
        "3\tde\tde\tNOUN\t_\t_\t1\tobl\t2.1:obl\t_\n",
        "\n",
        "# only a comment line; no words\n",
        "\n",
        "1\tz\t_\t_\t_\t_\t_\t_\t_\t_\n",
        "\n",
    );
    for ending in ["", "\n"] {
        // The file may also end after the last line with or without its newline.
        let text = match ending {
            "" => ranges_and_empty_nodes.to_string(),
            _ => ranges_and_empty_nodes.trim_end_matches('\n').to_string() + "\n",
        };
        for text in [text.clone(), text.trim_end_matches('\n').to_string()] {
            let document = conllu::read_str("ok.conllu", &text).expect("valid");
            assert_eq!(document.to_conllu(), text);
        }
    }
    let document = conllu::read_str("ok.conllu", ranges_and_empty_nodes).expect("valid");
    let first = &document.sentences[0];
    assert_eq!(first.len(), 3, "ranges and empty nodes are not words");
    assert_eq!(first.heads(), Some(vec![0, 0, 1, 1]));
    assert_eq!(
        document.sentences[2].heads(),
        None,
        "unannotated text has no heads"
    );
}
