//! The CIF grammar, construct by construct.
//!
//! Sources: the CIF 1.1 syntax specification (IUCr; S. R. Hall & B. McMahon (eds.),
//! International Tables for Crystallography Vol. G (2005), ch. 2.2) and, for CIF 2.0,
//! J. C. Bollinger, H. J. Bernstein et al., "Specification of the Crystallographic Information
//! File format, version 2.0", J. Appl. Cryst. 49 (2016) 277. The choices the specifications
//! leave open (duplicates, encodings, Ctrl-Z) are documented in `hopmap::cif`.

use hopmap::cif::{self, Item, Value, Version, parse, parse_number_with_su};

fn doc(text: &str) -> cif::Document {
    parse(text.as_bytes()).unwrap_or_else(|e| panic!("should parse: {e}\n{text}"))
}

fn err(text: &str) -> cif::CifError {
    match parse(text.as_bytes()) {
        Ok(d) => panic!("should fail, parsed {d:?}"),
        Err(e) => e,
    }
}

// --- blocks, tags, values -------------------------------------------------------------------

#[test]
fn data_blocks_hold_tag_value_pairs_in_file_order() {
    let d = doc("data_first\n_a 1\n_b two\n\nDATA_Second\n_c 3\n");
    assert_eq!(d.version, Version::V1_1);
    assert_eq!(d.blocks.len(), 2);
    assert_eq!(d.blocks[0].name, "first");
    assert_eq!(d.blocks[1].name, "Second");
    assert_eq!(d.blocks[1].line, 5);
    assert_eq!(d.blocks[0].text("_b"), Some("two"));
    assert!(
        d.block("SECOND").is_some(),
        "block names are case-insensitive"
    );
    assert!(d.warnings.is_empty());
}

#[test]
fn tags_are_case_insensitive() {
    let d = doc("data_x\n_Cell_Length_A 4.5937(3)\n");
    let b = &d.blocks[0];
    assert_eq!(b.text("_cell_length_a"), Some("4.5937(3)"));
    assert_eq!(b.text("_CELL_LENGTH_A"), Some("4.5937(3)"));
    assert_eq!(b.line_of("_cell_length_a"), Some(2));
}

#[test]
fn question_mark_is_unknown_and_full_stop_inapplicable() {
    let d = doc("data_x\n_a ?\n_b .\n_c '?'\n_d .5\n");
    let b = &d.blocks[0];
    assert_eq!(b.value("_a"), Some(&Value::Unknown));
    assert_eq!(b.value("_b"), Some(&Value::Inapplicable));
    assert_eq!(b.text("_a"), None);
    // quoted, '?' is just text
    assert_eq!(
        b.value("_c"),
        Some(&Value::Text {
            text: "?".into(),
            quoted: true,
            line: 4
        })
    );
    assert_eq!(b.text("_d"), Some(".5"));
}

#[test]
fn comments_run_to_the_end_of_the_line_but_not_inside_words() {
    let d = doc("# header\ndata_x # the block\n_a value#not-a-comment # comment\n_b 'x # y'\n");
    let b = &d.blocks[0];
    assert_eq!(b.text("_a"), Some("value#not-a-comment"));
    assert_eq!(b.text("_b"), Some("x # y"));
}

// --- quotes -----------------------------------------------------------------------------------

#[test]
fn cif11_quote_followed_by_a_non_blank_belongs_to_the_string() {
    let d = doc("data_x\n_a 'O'Neil'\n_b \"say \"hi\"now\"\n_c 'it''s'\n_d ''\n");
    let b = &d.blocks[0];
    assert_eq!(b.text("_a"), Some("O'Neil"));
    assert_eq!(b.text("_b"), Some("say \"hi\"now"));
    assert_eq!(b.text("_c"), Some("it''s"));
    assert_eq!(b.text("_d"), Some(""));
    // a quote followed by a blank closes the string, whatever follows
    let e = err("data_x\n_b \"say \"hi\" now\"\n");
    assert_eq!((e.line, e.column), (2, 14));
    assert!(e.message.contains("the value 'now\"' has no tag"), "{e}");
}

#[test]
fn cif11_words_may_start_with_brackets_or_dollar() {
    let d = doc("data_x\n_name [Pt(en)~2~][Au(CN)~2~]~2~\n_ref $frame\n");
    assert_eq!(d.blocks[0].text("_name"), Some("[Pt(en)~2~][Au(CN)~2~]~2~"));
    assert_eq!(d.blocks[0].text("_ref"), Some("$frame"));
}

// --- text fields -----------------------------------------------------------------------------

#[test]
fn semicolon_text_fields_span_lines() {
    let d = doc(
        "data_x\n_t\n;\nfirst line\n  second; 'quoted'\n;\n_u ;not-a-field\n_v\n;same line\n;\n",
    );
    let b = &d.blocks[0];
    assert_eq!(b.text("_t"), Some("first line\n  second; 'quoted'"));
    assert_eq!(b.value("_t").unwrap().line(), Some(3));
    assert_eq!(b.text("_u"), Some(";not-a-field"));
    assert_eq!(b.text("_v"), Some("same line"));
}

// --- loops -------------------------------------------------------------------------------------

#[test]
fn loops_read_values_row_major() {
    let d = doc(
        "data_x\nloop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n\
         Li1 0.0 0.0\nFe1 0.2822 0.25 O1 'a b'\n;\ntext\n;\n_after 1\n",
    );
    let b = &d.blocks[0];
    let l = b.find_loop("_ATOM_SITE_FRACT_X").expect("loop");
    assert_eq!(l.line, 2);
    assert_eq!(l.tags.len(), 3);
    assert_eq!(l.row_count(), 3);
    assert_eq!(l.column("_atom_site_fract_y"), Some(2));
    let rows: Vec<Vec<Option<&str>>> = l
        .rows()
        .map(|r| r.iter().map(Value::as_str).collect())
        .collect();
    assert_eq!(rows[1], [Some("Fe1"), Some("0.2822"), Some("0.25")]);
    assert_eq!(rows[2], [Some("O1"), Some("a b"), Some("text")]);
    assert_eq!(
        l.get(0, "_atom_site_label").and_then(Value::as_str),
        Some("Li1")
    );
    assert_eq!(l.row_line(1), 7);
    // a column of a loop with several rows is not a single value
    assert_eq!(b.value("_atom_site_label"), None);
    assert_eq!(b.text("_after"), Some("1"));
}

#[test]
fn a_single_row_loop_answers_value_lookups() {
    let d = doc("data_x\nloop_\n_cell_length_a\n_cell_length_b\n5.1 6.2\n");
    assert_eq!(d.blocks[0].text("_cell_length_b"), Some("6.2"));
}

#[test]
fn a_loop_whose_values_do_not_fill_rows_is_an_error_naming_its_line() {
    let e = err("data_x\n_a 1\n\nloop_\n_one\n_two\n_three\none two three\nfour five\n_b 2\n");
    assert_eq!((e.line, e.column), (4, 1));
    assert!(
        e.message
            .contains("loop_ at line 4 has 3 tags but 5 values"),
        "{e}"
    );
    assert!(e.message.contains("2 values left over"), "{e}");
}

#[test]
fn a_loop_without_tags_is_an_error() {
    let e = err("data_x\nloop_\n1 2 3\n");
    assert_eq!(e.line, 2);
    assert!(e.message.contains("has no tags"), "{e}");
}

#[test]
fn a_loop_without_values_is_a_warning() {
    let d = doc("data_x\nloop_\n_a\n_b\nloop_\n_c\n1\n");
    assert_eq!(d.blocks[0].find_loop("_a").unwrap().row_count(), 0);
    assert!(d.warnings[0].message.contains("no values"));
}

// --- save frames and global blocks -------------------------------------------------------------

#[test]
fn save_frames_belong_to_their_block() {
    let d = doc(
        "data_dict\n_a 1\nsave_frame_one\n_b 2\nloop_\n_c\n1 2\nsave_\nsave_empty\nsave_\n_d 3\n",
    );
    let b = &d.blocks[0];
    assert_eq!(b.frames.len(), 2);
    let f = b.frame("FRAME_ONE").unwrap();
    assert_eq!(f.line, 3);
    assert_eq!(f.text("_b"), Some("2"));
    assert_eq!(f.find_loop("_c").unwrap().row_count(), 2);
    assert!(b.frame("empty").unwrap().items.is_empty());
    assert_eq!(b.text("_d"), Some("3"));
    assert_eq!(b.text("_b"), None, "frame items are not block items");
}

#[test]
fn save_frames_do_not_nest_and_must_be_closed() {
    let e = err("data_x\nsave_a\n_b 1\nsave_c\n_d 2\nsave_\nsave_\n");
    assert_eq!(e.line, 4);
    assert!(e.message.contains("opened inside save frame 'a'"), "{e}");
    let e = err("data_x\nsave_a\n_b 1\n");
    assert_eq!(e.line, 2);
    assert!(e.message.contains("save frame 'a' is not closed"), "{e}");
    let e = err("data_x\n_b 1\nsave_\n");
    assert_eq!(e.line, 3);
    assert!(e.message.contains("none is open"), "{e}");
}

#[test]
fn a_star_global_block_is_kept_with_a_warning() {
    let d = doc("global_\n_g 1\ndata_x\n_a global_x\n");
    assert!(d.blocks[0].global);
    assert_eq!(d.blocks[0].text("_g"), Some("1"));
    assert_eq!(
        d.blocks[1].text("_a"),
        Some("global_x"),
        "global_x is an ordinary value"
    );
    assert!(d.block("").is_none());
    assert_eq!(d.warnings.len(), 1);
    assert_eq!(d.warnings[0].line, 1);
}

// --- reserved words and broken files -----------------------------------------------------------

#[test]
fn stop_is_a_reserved_word() {
    let e = err("data_x\n_a 1\nstop_\n");
    assert_eq!((e.line, e.column), (3, 1));
    assert!(e.message.contains("'stop_' is a reserved word"), "{e}");
}

#[test]
fn a_word_starting_with_data_is_a_header_so_the_tag_has_no_value() {
    let e = err("data_block\n_tag0 'data_cool'\n_tag1 data_cool\n");
    assert_eq!((e.line, e.column), (3, 1));
    assert!(
        e.message.contains(
            "tag '_tag1' has no value: expected a value, found the data block header 'data_cool'"
        ),
        "{e}"
    );
}

#[test]
fn data_without_a_name_is_an_error() {
    let e = err("data_a\n_x 1\ndata_ # no name\n");
    assert_eq!((e.line, e.column), (3, 1));
    assert!(
        e.message
            .contains("'data_' must be followed by a block name"),
        "{e}"
    );
}

#[test]
fn a_reserved_word_glued_to_a_tag_is_reported_as_such() {
    let e = err("data_a\nloop__tag 1\n");
    assert_eq!(e.line, 2);
    assert!(
        e.message
            .contains("reserved word must be followed by white space"),
        "{e}"
    );
}

#[test]
fn unterminated_quote_names_its_line_and_column() {
    let e = err("data_unclosed\n_tag1 value\n_tag2 'this is unclosed value\n_tag3 value\n");
    assert_eq!((e.line, e.column), (3, 7));
    assert!(
        e.message.starts_with("unterminated single-quoted string"),
        "{e}"
    );
    let e = err("data_u\n_t \"a\"b\n");
    assert_eq!((e.line, e.column), (2, 4));
    assert!(
        e.message.starts_with("unterminated double-quoted string"),
        "{e}"
    );
}

#[test]
fn unterminated_text_field_names_its_opening_line() {
    let e = err("data_x\n_a 1\n_t\n;\nnever closed\n_b 2 ; not a closing line\n");
    assert_eq!((e.line, e.column), (4, 1));
    assert!(e.message.starts_with("unterminated text field"), "{e}");
}

#[test]
fn a_value_without_a_tag_is_an_error() {
    let e = err("data_x\n_a 1 2\n");
    assert_eq!((e.line, e.column), (2, 6));
    assert!(e.message.contains("the value '2' has no tag"), "{e}");
}

#[test]
fn a_tag_without_a_value_is_an_error() {
    let e = err("data_x\n_a\n_b 2\n");
    assert_eq!((e.line, e.column), (2, 1));
    assert!(e.message.contains("tag '_a' has no value"), "{e}");
    let e = err("data_x\n_b 2\n_a");
    assert!(e.message.contains("found the end of the file"), "{e}");
}

#[test]
fn content_before_the_first_data_block_is_an_error() {
    let e = err("# comment\n_tag value\n");
    assert_eq!((e.line, e.column), (2, 1));
    assert!(e.message.contains("before any data block"), "{e}");
}

#[test]
fn empty_input_has_no_blocks() {
    assert!(doc("").blocks.is_empty());
    assert!(doc("# only a comment\n\n").blocks.is_empty());
}

// --- duplicates ----------------------------------------------------------------------------------

#[test]
fn a_repeated_tag_with_the_same_value_is_a_warning() {
    let d = doc("data_x\n_chemical_formula_weight 2604.88\n_chemical_formula_weight 2604.88\n");
    let b = &d.blocks[0];
    assert_eq!(b.items.len(), 1);
    assert!(b.duplicates.is_empty());
    assert_eq!(d.warnings.len(), 1);
    assert_eq!(d.warnings[0].line, 3);
}

#[test]
fn a_repeated_tag_with_another_value_keeps_the_first_and_records_the_second() {
    let d = doc("data_x\n_tag1 'Value 1'\n_tag1 \"Some other value\"\n");
    let b = &d.blocks[0];
    assert_eq!(b.text("_tag1"), Some("Value 1"));
    let dup: Vec<_> = b.conflicting("_TAG1").collect();
    assert_eq!(dup.len(), 1);
    assert_eq!(dup[0].line, 3);
    assert!(d.warnings[0].message.contains("different value"));
}

#[test]
fn a_looped_tag_given_twice_is_an_error() {
    let e = err("data_x\nloop_\n_a\n1 2\n_a 3\n");
    assert_eq!(e.line, 5);
    assert!(e.message.contains("in the loop at line 2"), "{e}");
    let e = err("data_x\n_a 3\nloop_\n_a\n1 2\n");
    assert_eq!(e.line, 3);
    assert!(e.message.contains("appears twice"), "{e}");
}

// --- line ends, encodings, control characters ----------------------------------------------------

#[test]
fn crlf_bom_tabs_and_a_trailing_ctrl_z_are_accepted() {
    let bytes = b"\xEF\xBB\xBFdata_x\r\n_a\t1\r\n_t\r\n;\r\nline\r\n;\r\n\x1A";
    let d = parse(bytes).unwrap();
    assert_eq!(d.blocks[0].text("_a"), Some("1"));
    assert_eq!(d.blocks[0].text("_t"), Some("line"));
    assert!(d.warnings.is_empty(), "{:?}", d.warnings);
    // old Mac line ends (lone CR)
    let d = parse(b"data_x\r_a 1\r_b 2\r").unwrap();
    assert_eq!(d.blocks[0].line_of("_b"), Some(3));
}

#[test]
fn a_ctrl_z_inside_the_file_is_white_space_with_a_warning() {
    let d = parse(b"data_x\n\x1A \x1A\n_a 1\n").unwrap();
    assert_eq!(d.blocks[0].text("_a"), Some("1"));
    assert_eq!(d.warnings[0].line, 2);
}

#[test]
fn bytes_that_are_not_utf8_are_replaced_with_a_warning() {
    let d = parse(b"data_x\n_a 1\n_name 'M\xfcller'\n").unwrap();
    assert_eq!(d.blocks[0].text("_name"), Some("M\u{fffd}ller"));
    assert_eq!(d.warnings.len(), 1);
    assert_eq!((d.warnings[0].line, d.warnings[0].column), (3, 9));
    assert!(d.warnings[0].message.contains("not valid UTF-8"));
}

#[test]
fn control_characters_in_values_are_kept_with_one_warning() {
    let d = parse(b"data_x\n_a '\x01'\n_b '\x02'\n").unwrap();
    assert_eq!(d.blocks[0].text("_a"), Some("\u{1}"));
    assert_eq!(d.warnings.len(), 1);
    assert_eq!(d.warnings[0].line, 2);
}

#[test]
fn unicode_tags_and_values_are_read_with_columns_in_characters() {
    let d = doc("data_žinios\n_kryptis Šiaurė\n_Būdvardis x\n");
    assert_eq!(d.blocks[0].name, "žinios");
    assert_eq!(d.blocks[0].text("_kryptis"), Some("Šiaurė"));
    assert_eq!(d.blocks[0].text("_BŪDVARDIS"), Some("x"));
    let e = err("data_ž\n_ėė 'ąą\n");
    assert_eq!((e.line, e.column), (2, 5));
}

// --- CIF 2.0 --------------------------------------------------------------------------------------

#[test]
fn cif2_magic_enables_lists_and_tables() {
    let d = doc("#\\#CIF_2.0\ndata_x\n_list [a 'b c' [1 2] {'k':v}]\n\
         _table {'v1':'a' 'v2': 20.2(3) 'nested':{'in':[x]}}\n_empty []\n");
    assert_eq!(d.version, Version::V2_0);
    let b = &d.blocks[0];
    let t = |s: &str, line| Value::Text {
        text: s.into(),
        quoted: false,
        line,
    };
    let q = |s: &str, line| Value::Text {
        text: s.into(),
        quoted: true,
        line,
    };
    assert_eq!(
        b.value("_list"),
        Some(&Value::List(vec![
            t("a", 3),
            q("b c", 3),
            Value::List(vec![t("1", 3), t("2", 3)]),
            Value::Table(vec![("k".into(), t("v", 3))]),
        ]))
    );
    let Some(Value::Table(entries)) = b.value("_table") else {
        panic!("table")
    };
    assert_eq!(entries[0], ("v1".to_string(), q("a", 4)));
    assert_eq!(
        entries[1].1.as_number_with_su(),
        Some((20.2, Some(0.30000000000000004)))
    );
    assert_eq!(
        entries[2].1,
        Value::Table(vec![("in".into(), Value::List(vec![t("x", 4)]))])
    );
    assert_eq!(b.value("_empty"), Some(&Value::List(vec![])));
    assert_eq!(b.text("_list"), None);
}

#[test]
fn cif2_triple_quotes_span_lines_and_single_quotes_close_at_the_first_quote() {
    let d = doc("#\\#CIF_2.0\ndata_x\n_a '''one\n'two'\nthree'''\n_b \"\"\"x\"\"\"\n_c 'plain'\n");
    let b = &d.blocks[0];
    assert_eq!(b.text("_a"), Some("one\n'two'\nthree"));
    assert_eq!(b.text("_b"), Some("x"));
    assert_eq!(b.text("_c"), Some("plain"));
    // the CIF 1.1 embedded-quote rule does not apply
    let e = err("#\\#CIF_2.0\ndata_x\n_a 'O'Neil'\n");
    assert_eq!(e.line, 3);
    assert!(
        e.message
            .contains("expected white space after the closing quote"),
        "{e}"
    );
}

#[test]
fn cif2_brackets_must_balance() {
    let e = err("#\\#CIF_2.0\ndata_x\n_a [1 2\n_b 3\n");
    assert_eq!((e.line, e.column), (4, 1));
    assert!(
        e.message
            .contains("closing the list opened at line 3, column 4"),
        "{e}"
    );
    let e = err("#\\#CIF_2.0\ndata_x\n_a {'k' 1}\n");
    assert!(
        e.message.contains("expected a quoted key followed by ':'"),
        "{e}"
    );
    let e = err("#\\#CIF_2.0\ndata_x\n_a 1 ]\n");
    assert!(e.message.contains("']' has no tag"), "{e}");
    let e = err("#\\#CIF_2.0\ndata_x\n_a '''never closed\n");
    assert_eq!((e.line, e.column), (3, 4));
}

#[test]
fn deep_nesting_is_an_error_not_a_stack_overflow() {
    let text = format!("#\\#CIF_2.0\ndata_x\n_a {}\n", "[".repeat(100_000));
    let e = err(&text);
    assert!(e.message.contains("nested more than"), "{e}");
}

// --- numbers and files ----------------------------------------------------------------------------

#[test]
fn numbers_carry_their_standard_uncertainty() {
    assert_eq!(
        parse_number_with_su("4.5937(3)").map(|(v, _)| v),
        Some(4.5937)
    );
    let (_, su) = parse_number_with_su("4.5937(3)").unwrap();
    assert!((su.unwrap() - 0.0003).abs() < 1e-15);
    assert_eq!(parse_number_with_su("90"), Some((90.0, None)));
    assert_eq!(parse_number_with_su("?"), None);
}

#[test]
fn parse_file_names_the_file_line_and_column() {
    let dir = std::env::temp_dir().join(format!("hopmap-cif-grammar-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let p = dir.join("broken.cif");
    std::fs::write(&p, "data_x\n_a 'open\n").unwrap();
    let e = cif::parse_file(&p).unwrap_err();
    assert_eq!(e.line, Some(2));
    assert_eq!(e.column, Some(4));
    assert!(
        e.to_string()
            .starts_with(&format!("{}:2:4: unterminated", p.display())),
        "{e}"
    );
    let e = cif::parse_file(&dir.join("missing.cif")).unwrap_err();
    assert!(e.message.starts_with("cannot read the file"), "{e}");
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn items_keep_pairs_and_loops_in_order() {
    let d = doc("data_x\n_a 1\nloop_\n_b\n1\n_c 2\n");
    let kinds: Vec<&str> = d.blocks[0]
        .items
        .iter()
        .map(|i| match i {
            Item::Pair(_) => "pair",
            Item::Loop(_) => "loop",
        })
        .collect();
    assert_eq!(kinds, ["pair", "loop", "pair"]);
}
