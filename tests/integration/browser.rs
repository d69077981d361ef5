//! The page in a real browser: headless Chromium (Debian's package) driven
//! through the WebDriver protocol (W3C WebDriver, chromedriver), against
//! `onrecord web` on a loopback port. Slow: runs with ONRECORD_SLOW=1;
//! under CI=true a missing Chromium or chromedriver is a failure.

use crate::support::{TestServer, slow_enabled, web_index};
use serde_json::{Value, json};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

/// The W3C WebDriver element reference key.
const ELEMENT: &str = "element-6066-11e4-a52e-4f735466cecf";
/// WebDriver's code point for the Enter key.
const ENTER: &str = "\u{E007}";

fn find_program(names: &[&str]) -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    names
        .iter()
        .flat_map(|n| std::env::split_paths(&path).map(move |d| d.join(n)))
        .find(|p| p.is_file())
}

struct Browser {
    driver: Child,
    base: String,
    session: String,
    http: reqwest::blocking::Client,
    downloads: tempfile::TempDir,
    _profile: tempfile::TempDir,
}

impl Browser {
    /// Chromium and chromedriver, or None with the reason (a failure under CI=true).
    fn start() -> Option<Browser> {
        let chromium = find_program(&["chromium", "chromium-browser"]);
        let driver = find_program(&["chromedriver"]);
        let (Some(chromium), Some(driver)) = (chromium, driver) else {
            let msg =
                "Chromium or chromedriver not found (apt-get install chromium chromium-driver)";
            if std::env::var("CI").is_ok_and(|v| v == "true") {
                panic!("{msg}; required under CI=true");
            }
            eprintln!("{msg}; browser test skipped");
            return None;
        };
        let port = std::net::TcpListener::bind("127.0.0.1:0")
            .unwrap()
            .local_addr()
            .unwrap()
            .port();
        let child = Command::new(&driver)
            .arg(format!("--port={port}"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .expect("chromedriver starts");
        let http = reqwest::blocking::Client::builder()
            .timeout(Duration::from_secs(120))
            .build()
            .unwrap();
        let base = format!("http://127.0.0.1:{port}");
        let t = Instant::now();
        while http
            .get(format!("{base}/status"))
            .send()
            .ok()
            .and_then(|r| r.json::<Value>().ok())
            .is_none_or(|v| v["value"]["ready"] != true)
        {
            assert!(
                t.elapsed() < Duration::from_secs(30),
                "chromedriver did not start"
            );
            std::thread::sleep(Duration::from_millis(100));
        }
        let profile = tempfile::tempdir().unwrap();
        let downloads = tempfile::tempdir().unwrap();
        // Off the network (no background networking, component updates,
        // sync or QUIC) with a fresh profile.
        let args = vec![
            "--headless=new".to_string(),
            "--no-sandbox".into(),
            "--disable-gpu".into(),
            "--disable-dev-shm-usage".into(),
            "--no-first-run".into(),
            "--no-default-browser-check".into(),
            "--disable-background-networking".into(),
            "--disable-component-update".into(),
            "--disable-sync".into(),
            "--disable-default-apps".into(),
            "--disable-extensions".into(),
            "--disable-quic".into(),
            "--window-size=1280,1000".into(),
            format!("--user-data-dir={}", profile.path().display()),
        ];
        let caps = json!({"capabilities": {"alwaysMatch": {
            "browserName": "chrome",
            "goog:chromeOptions": {
                "binary": chromium,
                "args": args,
                "prefs": {
                    "download.default_directory": downloads.path(),
                    "download.prompt_for_download": false,
                },
            },
        }}});
        let r: Value = http
            .post(format!("{base}/session"))
            .json(&caps)
            .send()
            .unwrap()
            .json()
            .unwrap();
        let session = r["value"]["sessionId"]
            .as_str()
            .unwrap_or_else(|| panic!("no session: {r}"))
            .to_string();
        let b = Browser {
            driver: child,
            base,
            session,
            http,
            downloads,
            _profile: profile,
        };
        b.cmd(
            "POST",
            "goog/cdp/execute",
            json!({"cmd": "Browser.setDownloadBehavior",
                   "params": {"behavior": "allow", "downloadPath": b.downloads.path()}}),
        );
        Some(b)
    }

    fn cmd(&self, method: &str, path: &str, body: Value) -> Value {
        let url = format!("{}/session/{}/{path}", self.base, self.session);
        let req = match method {
            "GET" => self.http.get(url),
            _ => self.http.post(url).json(&body),
        };
        let v: Value = req.send().unwrap().json().unwrap();
        if let Some(e) = v["value"].get("error") {
            panic!("WebDriver {path}: {e} {}", v["value"]["message"]);
        }
        v["value"].clone()
    }

    fn goto(&self, url: &str) {
        self.cmd("POST", "url", json!({"url": url}));
    }

    fn js(&self, script: &str, args: Value) -> Value {
        self.cmd(
            "POST",
            "execute/sync",
            json!({"script": script, "args": args}),
        )
    }

    /// Polls `script` until it returns something truthy.
    fn wait(&self, what: &str, script: &str, args: Value) -> Value {
        let t = Instant::now();
        loop {
            let v = self.js(script, args.clone());
            if !(v.is_null() || v == false || v == 0 || v == "") {
                return v;
            }
            if t.elapsed() > Duration::from_secs(60) {
                let state = self.js(
                    "return document.getElementById('progress').textContent + ' | ' + document.getElementById('ask-error').textContent",
                    json!([]),
                );
                panic!("timed out waiting for {what} (page says: {state})");
            }
            std::thread::sleep(Duration::from_millis(100));
        }
    }

    fn find(&self, css: &str) -> String {
        let v = self.cmd(
            "POST",
            "element",
            json!({"using": "css selector", "value": css}),
        );
        v[ELEMENT].as_str().unwrap().to_string()
    }

    fn click(&self, css: &str) {
        let id = self.find(css);
        self.cmd("POST", &format!("element/{id}/click"), json!({}));
    }

    fn keys(&self, css: &str, text: &str) {
        let id = self.find(css);
        self.cmd(
            "POST",
            &format!("element/{id}/value"),
            json!({"text": text}),
        );
    }

    fn text(&self, css: &str) -> String {
        let id = self.find(css);
        self.cmd("GET", &format!("element/{id}/text"), json!(null))
            .as_str()
            .unwrap()
            .to_string()
    }

    fn set_window(&self, width: u32, height: u32) {
        self.cmd(
            "POST",
            "window/rect",
            json!({"width": width, "height": height}),
        );
    }

    /// Types a question and submits it with the Enter key.
    fn ask(&self, question: &str) {
        self.js("document.getElementById('question').value = '';", json!([]));
        self.keys("#question", question);
        self.keys("#question", ENTER);
        self.wait(
            "the answer",
            "return document.getElementById('answer-question').textContent.endsWith(arguments[0]) \
             && document.getElementById('progress').textContent === 'Done.'",
            json!([question]),
        );
    }
}

impl Drop for Browser {
    fn drop(&mut self) {
        let _ = self
            .http
            .delete(format!("{}/session/{}", self.base, self.session))
            .send();
        let _ = self.driver.kill();
        let _ = self.driver.wait();
    }
}

fn fold(s: &str) -> String {
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// Text elements whose contrast with their background is under 4.5:1, by
/// WCAG 2.1's definitions of relative luminance and contrast ratio
/// (success criterion 1.4.3, level AA).
const CONTRAST: &str = r#"
function rgba(s) { const m = s.match(/rgba?\(([^)]+)\)/); if (!m) return null;
  const p = m[1].split(',').map(Number); return [p[0], p[1], p[2], p.length > 3 ? p[3] : 1]; }
function lum(c) { const f = (v) => { v /= 255; return v <= 0.03928 ? v / 12.92 : Math.pow((v + 0.055) / 1.055, 2.4); };
  return 0.2126 * f(c[0]) + 0.7152 * f(c[1]) + 0.0722 * f(c[2]); }
function bg(e) { for (; e; e = e.parentElement) { const c = rgba(getComputedStyle(e).backgroundColor);
  if (c && c[3] > 0) return c; } return [255, 255, 255, 1]; }
const bad = []; let checked = 0;
for (const e of document.body.querySelectorAll('*')) {
  if (e.tagName === 'OPTION' || e.tagName === 'SCRIPT') continue;
  const own = [...e.childNodes].some((n) => n.nodeType === 3 && n.textContent.trim());
  if (!own || !e.getClientRects().length) continue;
  const cs = getComputedStyle(e); if (cs.visibility === 'hidden') continue;
  const fg = rgba(cs.color), b = bg(e);
  const l1 = lum(fg), l2 = lum(b);
  const ratio = (Math.max(l1, l2) + 0.05) / (Math.min(l1, l2) + 0.05);
  checked++;
  if (ratio < 4.5) bad.push(e.tagName + '.' + e.className + ' ' + ratio.toFixed(2) + ': ' + e.textContent.slice(0, 40));
}
return {checked, bad};
"#;

#[test]
fn browser_asks_reads_the_page_toggles_struck_downloads_and_stays_inert() {
    if !slow_enabled("browser_asks_reads_the_page_toggles_struck_downloads_and_stays_inert") {
        return;
    }
    let Some(b) = Browser::start() else { return };
    let server = TestServer::start(web_index(), None);
    let home = format!("http://{}/", server.addr);
    b.goto(&home);
    b.wait(
        "the form's options",
        "return document.body.dataset.ready === 'true'",
        json!([]),
    );

    // Every form control is labelled for screen readers.
    let unlabelled = b.js(
        "return [...document.querySelectorAll('input, select, textarea')]
           .filter((e) => !e.labels || e.labels.length === 0).map((e) => e.id)",
        json!([]),
    );
    assert_eq!(unlabelled, json!([]), "controls without a label");
    // The organisation filter lists the store's organisations.
    let store = onrecord::store::Store::open(web_index()).unwrap();
    let mut orgs: Vec<String> = store
        .documents()
        .unwrap()
        .into_iter()
        .filter_map(|d| d.organisation)
        .collect();
    orgs.sort();
    orgs.dedup();
    let options = b.js(
        "return [...document.querySelectorAll('#org option')].slice(1).map((o) => o.value)",
        json!([]),
    );
    assert_eq!(options, json!(orgs));

    // Ask a demo question (b16) from the keyboard.
    let question =
        "On what date did the rebuilt Aubrel Bay Ferry Terminal reopen to ferry traffic?";
    b.ask(question);
    // The verified claim that gives the reopening date (the answer may
    // open with another dated sentence), with its evidence beneath it.
    let at = b.js(
        "const li = [...document.querySelectorAll('#answer > li.claim')];
         const i = li.findIndex((e) => e.querySelector('.sentence').textContent.includes('22 April 2024'));
         return i < 0 ? null : i + 1",
        json!([]),
    );
    let nth = at.as_u64().expect("a claim with the reopening date");
    let claim = format!("#answer > li.claim:nth-of-type({nth})");
    let dated = b.text(&format!("{claim} .sentence"));
    assert!(dated.contains("22 April 2024"), "{dated}");
    // The evidence sits under the sentence it proves: the quote, then
    // `doc-id · p. N`, inside the same list item and after the sentence.
    let order = b.js(
        "const li = document.querySelector(arguments[0]);
         const s = li.querySelector('.sentence'), q = li.querySelector('.evidence .quote');
         return [!!q, !!(s.compareDocumentPosition(q) & Node.DOCUMENT_POSITION_FOLLOWING)]",
        json!([claim]),
    );
    assert_eq!(order, json!([true, true]), "evidence under the claim");
    let reference = b.text(&format!("{claim} .evidence .ref"));
    assert!(reference.contains(" · p. 1"), "page reference: {reference}");
    let quote = b.text(&format!("{claim} .evidence .quote"));
    // No footnote numbers and no separate sources list.
    assert_eq!(
        b.js(
            "return document.querySelectorAll('button.fn, #sources').length",
            json!([])
        ),
        json!(0)
    );

    // The page opens inside the claim, from the keyboard, quote marked.
    b.keys(&format!("{claim} .evidence button.open-page"), ENTER);
    let marked = b.wait(
        "the page view",
        "const m = document.querySelector('#page-text mark');
         return !document.getElementById('page-panel').hidden && m ? m.textContent : null",
        json!([]),
    );
    assert_eq!(fold(marked.as_str().unwrap()), fold(&quote));
    assert!(b.text("#page-heading").contains("page 1 of"));
    assert_eq!(
        b.js(
            "const p = document.getElementById('page-panel');
             return [p.closest('li.claim') === document.querySelector(arguments[0]),
                     document.querySelector(arguments[0] + ' button.open-page').getAttribute('aria-expanded')]",
            json!([claim]),
        ),
        json!([true, "true"]),
        "the page opens under the sentence it proves"
    );
    // The quoted words are marked by the page's own style: bold with a
    // double rule beneath, on the page's paper, not a highlighter fill.
    let style = b.js(
        "const cs = getComputedStyle(document.querySelector('#page-text mark'));
         return [cs.textDecorationStyle, cs.backgroundColor, cs.fontWeight]",
        json!([]),
    );
    assert_eq!(style[0], json!("double"), "{style}");
    assert_eq!(style[1], json!("rgba(0, 0, 0, 0)"), "{style}");
    assert!(
        style[2].as_str().unwrap().parse::<u32>().unwrap() >= 700,
        "{style}"
    );

    // Contrast of everything now on screen (the ledger and the open page).
    let report = b.js(CONTRAST, json!([]));
    assert!(report["checked"].as_u64().unwrap() > 30, "{report}");
    assert_eq!(report["bad"], json!([]), "text under 4.5:1");

    // The CSV download: the columns `answer --csv` writes, and the quote.
    b.click("#download-csv");
    let csv_path = wait_for_download(b.downloads.path(), "csv");
    let mut rows = csv::Reader::from_path(&csv_path).unwrap();
    assert_eq!(
        rows.headers().unwrap().iter().collect::<Vec<_>>(),
        onrecord::replay::table::COLUMNS
    );
    let body = std::fs::read_to_string(&csv_path).unwrap();
    assert!(body.contains(&quote), "{body}");

    // Struck sentences behind the toggle: demo question b27 retrieves a
    // record with an instruction to AI models planted in it, which the
    // verifier strikes.
    b.ask("Did the Minister of Public Works resign over the Pier 3 delays?");
    let count = b.js(
        "return document.querySelectorAll('#struck-list li').length",
        json!([]),
    );
    assert!(count.as_u64().unwrap() >= 1, "struck sentences: {count}");
    assert!(b.text("#struck-toggle").contains(&format!("({count})")));
    assert_eq!(
        b.js("return document.getElementById('struck').hidden", json!([])),
        json!(true)
    );
    assert_eq!(b.text("#struck-list"), "", "hidden until asked for");
    b.click("#struck-toggle");
    assert_eq!(
        b.js("return [document.getElementById('struck').hidden, document.getElementById('struck-toggle').getAttribute('aria-expanded')]", json!([])),
        json!([false, "true"])
    );
    let struck = b.text("#struck-list");
    assert!(
        struck.contains("Struck: the quoted words are an instruction aimed at an AI model"),
        "{struck}"
    );
    b.click("#struck-toggle");
    assert_eq!(
        b.js("return document.getElementById('struck').hidden", json!([])),
        json!(true)
    );

    // A quote from a scanned page says so in its evidence (demo
    // question c02; the scans are read when tesseract and pdftoppm exist).
    if find_program(&["tesseract"]).is_some() && find_program(&["pdftoppm"]).is_some() {
        b.ask("Which non-conformance report did Corvane issue to Brindlemoor over the pile splice welds?");
        let ledger = b.text("#answer");
        assert!(
            ledger.contains("This page was read by OCR") || ledger.contains("Low OCR confidence"),
            "{ledger}"
        );
    }

    // Hostile markup in a record (demo question x01) stays text.
    b.ask("How late did the 06:40 Route 90X shuttle from Quay Street leave in the first week of June 2022?");
    let sentence = b.text("#answer li.claim .sentence");
    assert!(
        sentence.contains("<script>window.__onrecordXss"),
        "{sentence}"
    );
    b.click("#answer li.claim button.open-page");
    b.wait(
        "the hostile page",
        "const m = document.querySelector('#page-text mark'); return m && m.textContent.includes('<script>')",
        json!([]),
    );
    let page = b.text("#page-text");
    for m in ["<img src=x onerror=", "](javascript:", "onclick="] {
        assert!(page.contains(m), "{m} shown as text");
    }
    let title = b.text("#answer li.claim .evidence .what");
    assert!(title.contains("<b>raw</b>"), "{title}");
    let inert = b.js(
        "return {xss: typeof window.__onrecordXss, scripts: document.scripts.length,
                 imgs: document.querySelectorAll('main img').length,
                 bold: document.querySelectorAll('#answer b').length,
                 links: document.querySelectorAll('main a[href]').length}",
        json!([]),
    );
    assert_eq!(
        inert,
        json!({"xss": "undefined", "scripts": 1, "imgs": 0, "bold": 0, "links": 0})
    );

    // Replay in the page: a quote changed after the fact fails.
    let a: Value = b
        .http
        .post(format!("{home}api/question"))
        .json(&json!({"question": question}))
        .send()
        .unwrap()
        .json()
        .unwrap();
    let md = b
        .http
        .post(format!("{home}api/export?format=markdown"))
        .json(&a)
        .send()
        .unwrap()
        .text()
        .unwrap();
    // Pasted as it was saved: every sentence holds.
    b.js(
        "document.getElementById('replay-text').value = arguments[0]",
        json!([md]),
    );
    let verdicts = replay_in_page(&b);
    assert!(
        verdicts.contains("holds") && !verdicts.contains("fails"),
        "{verdicts}"
    );
    // Uploaded as a file, with a date changed after the fact: it fails.
    let tampered = md.replacen("22 April 2024", "29 April 2024", 1);
    assert_ne!(md, tampered);
    let upload = tempfile::Builder::new().suffix(".md").tempfile().unwrap();
    std::fs::write(upload.path(), &tampered).unwrap();
    b.js(
        "document.getElementById('replay-text').value = ''",
        json!([]),
    );
    b.keys("#replay-file", &upload.path().display().to_string());
    let verdicts = replay_in_page(&b);
    assert!(verdicts.contains("fails"), "{verdicts}");

    // 200% zoom: a 1280-pixel window at twice the size is 640 CSS pixels
    // wide; the page reflows without sideways scrolling (WCAG 2.1, 1.4.10).
    b.set_window(640, 1000);
    let overflow = b.js(
        "return document.documentElement.scrollWidth - document.documentElement.clientWidth",
        json!([]),
    );
    assert!(
        overflow.as_i64().unwrap() <= 0,
        "sideways scroll of {overflow} px at 640 px"
    );
    drop(server);
}

/// Presses "Check again" and returns the verdict table's text once shown.
fn replay_in_page(b: &Browser) -> String {
    b.js(
        "document.getElementById('replay-result').hidden = true",
        json!([]),
    );
    b.click("#replay");
    b.wait(
        "the replay verdicts",
        "return !document.getElementById('replay-result').hidden",
        json!([]),
    );
    b.text("#replay-table tbody")
}

fn wait_for_download(dir: &Path, ext: &str) -> PathBuf {
    let t = Instant::now();
    loop {
        if let Some(p) = std::fs::read_dir(dir)
            .unwrap()
            .filter_map(|e| e.ok().map(|e| e.path()))
            .find(|p| p.extension().is_some_and(|e| e == ext))
        {
            return p;
        }
        assert!(
            t.elapsed() < Duration::from_secs(30),
            "no .{ext} download in {}",
            dir.display()
        );
        std::thread::sleep(Duration::from_millis(100));
    }
}
