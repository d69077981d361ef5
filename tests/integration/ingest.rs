//! Ingest behaviour: idempotence, replacement, bad files, filters, format
//! versions, and exact page mapping of stored chunks.

use crate::support::{ingest, ingest_with, write};
use onrecord::chunk::chunk_text_from_pages;
use onrecord::extract::pdf::{
    PdfPage, write_image_only_pdf, write_password_protected_pdf, write_text_pdf,
};
use onrecord::ingest::{IngestConfig, Severity};
use onrecord::manifest::Manifest;
use onrecord::retrieve::Index;
use onrecord::store::Store;
use onrecord::types::{DocId, Filters};

fn pdf(dir: &std::path::Path, name: &str, pages: &[&[&str]]) -> std::path::PathBuf {
    let p = dir.join(name);
    let pages: Vec<PdfPage> = pages
        .iter()
        .map(|l| PdfPage {
            lines: l.iter().map(|s| s.to_string()).collect(),
        })
        .collect();
    write_text_pdf(&p, name, &pages).unwrap();
    p
}

#[test]
fn reingesting_unchanged_files_does_nothing() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "a.txt",
        "The Pier 3 budget rose.\u{c}Page two text here.",
    );
    write(
        src.path(),
        "sub/b.md",
        "# Ramp report\n\nThe ramp failed inspection.",
    );
    pdf(
        src.path(),
        "c.pdf",
        &[&["The dredging contract was amended."], &["Second page."]],
    );
    let (r1, d1) = ingest(idx.path(), &[src.path().to_path_buf()]);
    assert_eq!((r1.ingested, r1.failed), (3, 0), "{d1:?}");
    assert_eq!(r1.pages, 2 + 1 + 2);
    let generation = Store::open(idx.path()).unwrap().generation().unwrap();
    let (r2, _) = ingest(idx.path(), &[src.path().to_path_buf()]);
    assert_eq!((r2.ingested, r2.unchanged), (0, 3));
    assert_eq!(
        Store::open(idx.path()).unwrap().generation().unwrap(),
        generation
    );
}

#[test]
fn a_changed_file_replaces_its_old_version() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    let a = write(
        src.path(),
        "memo.txt",
        "The tender closed in March with four bids.",
    );
    ingest(idx.path(), std::slice::from_ref(&a));
    let index = Index::open(idx.path()).unwrap();
    let old = index.search("tender bids", &Filters::default(), 5).unwrap();
    assert_eq!(old.len(), 1);
    drop(index);
    write(
        src.path(),
        "memo.txt",
        "The tender was cancelled after the ferry study.",
    );
    let (r, _) = ingest(idx.path(), &[a]);
    assert_eq!((r.ingested, r.replaced), (1, 1));
    let index = Index::open(idx.path()).unwrap();
    assert!(
        index
            .search("four bids", &Filters::default(), 5)
            .unwrap()
            .is_empty()
    );
    let new = index
        .search("cancelled ferry", &Filters::default(), 5)
        .unwrap();
    assert_eq!(new.len(), 1);
    assert_eq!(
        new[0].chunk.doc_id, old[0].chunk.doc_id,
        "the document keeps its id"
    );
    assert!(
        new[0].chunk.id > old[0].chunk.id,
        "chunk ids are never reused"
    );
    assert!(index.store.chunks(&[old[0].chunk.id]).unwrap().is_empty());
    assert_eq!(index.store.counts().unwrap(), (1, 1, 1));
}

#[test]
fn bad_files_become_diagnostics_and_nothing_stored_is_lost() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    let good = pdf(
        src.path(),
        "good.pdf",
        &[&["The harbour board approved the budget."]],
    );
    let later_bad = write(
        src.path(),
        "notes.txt",
        "Original notes about the ferry ramp.",
    );
    ingest(idx.path(), &[good.clone(), later_bad.clone()]);
    let before = Store::open(idx.path()).unwrap().counts().unwrap();

    let bad = tempfile::tempdir().unwrap();
    let corrupt = write(
        bad.path(),
        "corrupt.pdf",
        b"%PDF-1.4\n1 0 obj << /Type /Catalog",
    );
    let empty = write(bad.path(), "empty.pdf", b"");
    let encrypted = bad.path().join("locked.pdf");
    write_password_protected_pdf(&encrypted).unwrap();
    let scan = bad.path().join("scan.pdf");
    write_image_only_pdf(&scan, 2).unwrap();
    let blank_txt = write(bad.path(), "blank.txt", "   \n\n");
    // A file stored earlier that is now unreadable keeps its stored version.
    std::fs::write(&later_bad, [0xff, 0xfe, 0x00]).unwrap();
    let renamed = later_bad.with_extension("pdf");
    std::fs::rename(&later_bad, &renamed).unwrap();
    write(
        bad.path(),
        "ok.txt",
        "A good file in a bad batch is still ingested.",
    );

    let (r, diags) = ingest(idx.path(), &[bad.path().to_path_buf(), renamed.clone()]);
    assert_eq!(r.ingested, 1, "{diags:#?}");
    assert_eq!(r.failed, 6, "{diags:#?}");
    let reason = |p: &std::path::Path| {
        diags
            .iter()
            .find(|d| d.path == p && d.severity == Severity::Error)
            .map(|d| d.message.clone())
            .unwrap_or_else(|| panic!("no diagnostic for {}: {diags:#?}", p.display()))
    };
    assert!(
        reason(&corrupt).contains("not a readable PDF"),
        "{}",
        reason(&corrupt)
    );
    assert!(
        reason(&empty).contains("not a readable PDF"),
        "{}",
        reason(&empty)
    );
    assert!(
        reason(&encrypted).contains("encrypted"),
        "{}",
        reason(&encrypted)
    );
    assert!(reason(&scan).contains("no text layer"), "{}", reason(&scan));
    assert!(
        reason(&blank_txt).contains("empty"),
        "{}",
        reason(&blank_txt)
    );
    assert!(reason(&renamed).contains("not a readable PDF"));

    let index = Index::open(idx.path()).unwrap();
    let after = index.store.counts().unwrap();
    assert_eq!(after.0, before.0 + 1);
    assert_eq!(
        index
            .search("harbour board budget", &Filters::default(), 3)
            .unwrap()
            .len(),
        1
    );
    assert_eq!(
        index
            .search("ferry ramp notes", &Filters::default(), 3)
            .unwrap()
            .len(),
        1
    );
}

#[test]
fn filters_restrict_search_by_date_organisation_and_document() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(src.path(), "a.txt", "Dredging costs for the Pier 3 berth.");
    write(
        src.path(),
        "b.txt",
        "Dredging costs for the Pier 3 approach channel.",
    );
    write(
        src.path(),
        "c.txt",
        "Dredging costs reviewed by the auditor.",
    );
    write(
        src.path(),
        "d.txt",
        "Dredging costs with no date on record.",
    );
    let m = write(
        src.path(),
        "manifest.csv",
        "file,id,title,organisation,date\n\
         a.txt,a,A,Port Aubrel Harbour Authority,2019-05-02\n\
         b.txt,b,B,Ministry of Public Works,2021-06-30\n\
         c.txt,c,C,Office of the Auditor,2024-01-15\n\
         d.txt,d,D,Ministry of Public Works,\n",
    );
    let cfg = IngestConfig {
        manifest: Manifest::load(&m).unwrap(),
        ..Default::default()
    };
    let (r, diags) = ingest_with(idx.path(), &[src.path().to_path_buf()], &cfg);
    assert_eq!(r.ingested, 4, "{diags:?}");
    assert_eq!(r.skipped, 1, "the manifest itself is not a record");
    assert_eq!(r.skipped_types.get(".csv"), Some(&1));
    let index = Index::open(idx.path()).unwrap();
    let docs = |f: Filters| {
        let mut v: Vec<String> = index
            .search("dredging costs", &f, 10)
            .unwrap()
            .into_iter()
            .map(|h| h.chunk.doc_id.0)
            .collect();
        v.sort();
        v
    };
    let f = |from: Option<&str>, to: Option<&str>, org: Option<&str>, d: &[&str]| Filters {
        from: from.map(Into::into),
        to: to.map(Into::into),
        org: org.map(Into::into),
        docs: d.iter().map(|s| DocId(s.to_string())).collect(),
    };
    // (filters, expected documents)
    let cases = [
        (f(None, None, None, &[]), vec!["a", "b", "c", "d"]),
        (f(Some("2020-01-01"), None, None, &[]), vec!["b", "c"]),
        (f(None, Some("2021"), None, &[]), vec!["a", "b"]),
        (f(None, Some("2021-06"), None, &[]), vec!["a", "b"]),
        (f(None, Some("2021-05"), None, &[]), vec!["a"]),
        (f(None, None, Some("public works"), &[]), vec!["b", "d"]),
        (f(Some("2020"), None, Some("works"), &[]), vec!["b"]),
        (f(None, None, None, &["c", "a"]), vec!["a", "c"]),
        (f(None, None, Some("nobody"), &[]), vec![]),
    ];
    for (filters, want) in cases {
        assert_eq!(docs(filters.clone()), want, "{filters:?}");
    }
}

#[test]
fn a_store_in_another_format_is_refused_with_a_clear_message() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    ingest(
        idx.path(),
        &[write(src.path(), "a.txt", "Some text for the store.")],
    );
    let db = rusqlite::Connection::open(idx.path().join("store.sqlite")).unwrap();
    db.execute("UPDATE meta SET value = '999' WHERE key = 'format'", [])
        .unwrap();
    drop(db);
    let err = Index::open(idx.path())
        .err()
        .expect("a mismatched store must not open");
    let msg = err.to_string();
    assert!(
        msg.contains("format 999")
            && msg.contains(&format!("reads format {}", onrecord::store::STORE_FORMAT)),
        "{msg}"
    );
    let err = Store::open(tempfile::tempdir().unwrap().path())
        .err()
        .unwrap();
    assert!(err.to_string().contains("onrecord add"), "{err}");
}

#[test]
fn a_lost_or_stale_bm25_index_is_rebuilt_from_the_store() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    ingest(
        idx.path(),
        &[write(
            src.path(),
            "a.txt",
            "The ferry ramp hinge cracked in April.",
        )],
    );
    std::fs::remove_dir_all(idx.path().join("bm25")).unwrap();
    let index = Index::open(idx.path()).unwrap();
    assert_eq!(
        index
            .search("ramp hinge", &Filters::default(), 3)
            .unwrap()
            .len(),
        1
    );
}

#[test]
fn every_stored_chunk_is_exactly_its_page_slice() {
    let src = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    let long: String = (0..60)
        .map(|i| format!("Sentence {i} mentions the Pier 3 ferry terminal and its budget. "))
        .collect();
    write(
        src.path(),
        "long.txt",
        format!("{long}\u{c}{long}\u{c}Short last page."),
    );
    pdf(
        src.path(),
        "p.pdf",
        &[
            &["Memo re: Pier 3", "", "The con-", "tract was signed."],
            &["Page two of the memo."],
        ],
    );
    let (r, _) = ingest(idx.path(), &[src.path().to_path_buf()]);
    assert!(r.chunks > 4);
    let store = Store::open(idx.path()).unwrap();
    let mut checked = 0;
    let mut spanning = 0;
    store
        .for_each_chunk(|c| {
            let pages = store.pages(&c.doc_id).unwrap();
            let rebuilt = chunk_text_from_pages(&pages, &c.span);
            assert_eq!(rebuilt.as_deref(), Some(c.text.as_str()), "chunk {}", c.id);
            checked += 1;
            spanning += usize::from(c.span.start_page != c.span.end_page);
            Ok(())
        })
        .unwrap();
    assert_eq!(checked as u64, store.counts().unwrap().2);
    assert!(
        spanning > 0,
        "the long document has a chunk across a page break"
    );
}

/// Issue 26, item 9: entries of a folder that are not regular files are
/// counted and named, not passed over in silence. A symbolic link is not
/// followed (a release must not pull in a file from elsewhere on the
/// machine); a named pipe is not opened (it would block the run).
#[cfg(unix)]
#[test]
fn links_and_pipes_in_a_folder_are_counted_and_named_issue_26() {
    let src = tempfile::tempdir().unwrap();
    let elsewhere = tempfile::tempdir().unwrap();
    let idx = tempfile::tempdir().unwrap();
    write(
        src.path(),
        "memo.txt",
        "The ramp was closed on 14 March 2022.",
    );
    let secret = write(
        elsewhere.path(),
        "secret.txt",
        "Private notes, not part of the release.",
    );
    std::os::unix::fs::symlink(&secret, src.path().join("linked.txt")).unwrap();
    let fifo = src.path().join("pipe.txt");
    let c = std::ffi::CString::new(fifo.to_str().unwrap()).unwrap();
    assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0);

    let (report, diags) = ingest(idx.path(), &[src.path().to_path_buf()]);
    assert_eq!(report.ingested, 1, "{diags:?}");
    assert_eq!(report.failed, 0, "{diags:?}");
    assert_eq!(report.skipped, 2, "{report:?}");
    assert_eq!(
        report.skipped_types.get("(symbolic link)"),
        Some(&1),
        "{report:?}"
    );
    assert_eq!(
        report.skipped_types.get("(named pipe)"),
        Some(&1),
        "{report:?}"
    );
    let named = |name: &str| {
        diags
            .iter()
            .find(|d| d.path.ends_with(name))
            .unwrap_or_else(|| panic!("{name} not named: {diags:?}"))
    };
    let link = named("linked.txt");
    assert_eq!(link.severity, Severity::Warning);
    assert!(
        link.message.contains("symbolic link") && link.message.contains("secret.txt"),
        "{}",
        link.message
    );
    let pipe = named("pipe.txt");
    assert!(pipe.message.contains("named pipe"), "{}", pipe.message);
    let store = Store::open(idx.path()).unwrap();
    let docs: Vec<String> = store
        .documents()
        .unwrap()
        .into_iter()
        .map(|d| d.doc_id.0)
        .collect();
    assert_eq!(docs, ["memo"], "nothing from outside the release");

    // Named on the command line, a pipe is an error that says what it is.
    let (report, diags) = ingest(idx.path(), std::slice::from_ref(&fifo));
    assert_eq!(report.failed, 1);
    assert!(diags[0].message.contains("a named pipe"), "{diags:?}");
}
