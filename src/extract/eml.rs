//! E-mail (.eml, RFC 5322 / MIME): the headers become metadata and open
//! page 1; the body follows on page 1; each text attachment is a page of its
//! own. Other attachments are noted, not extracted.

use super::{ExtractError, Extracted};
use crate::types::DocMeta;
use mail_parser::{Address, MessageParser, MimeHeaders};

fn addresses(a: Option<&Address<'_>>) -> Option<String> {
    let list: Vec<String> = a?
        .iter()
        .map(|x| match (x.name(), x.address()) {
            (Some(n), Some(ad)) => format!("{n} <{ad}>"),
            (None, Some(ad)) => ad.to_string(),
            (Some(n), None) => n.to_string(),
            (None, None) => String::new(),
        })
        .filter(|s| !s.is_empty())
        .collect();
    (!list.is_empty()).then(|| list.join(", "))
}

pub(super) fn extract(bytes: &[u8]) -> Result<Extracted, ExtractError> {
    let msg = MessageParser::default()
        .parse(bytes)
        .ok_or_else(|| ExtractError::Email("no message headers found".into()))?;
    let from = addresses(msg.from());
    let to = addresses(msg.to());
    let cc = addresses(msg.cc());
    let subject = msg.subject().map(|s| s.to_string());
    let date = msg
        .date()
        .map(|d| format!("{:04}-{:02}-{:02}", d.year, d.month, d.day));
    if from.is_none() && subject.is_none() && msg.date().is_none() {
        return Err(ExtractError::Email(
            "no From, Subject or Date header".into(),
        ));
    }
    let mut head = String::new();
    for (k, v) in [
        ("From", &from),
        ("To", &to),
        ("Cc", &cc),
        ("Date", &msg.date().map(|d| d.to_rfc822())),
        ("Subject", &subject),
    ] {
        if let Some(v) = v {
            head.push_str(&format!("{k}: {v}\n"));
        }
    }
    let body = msg.body_text(0).map(|b| b.into_owned()).unwrap_or_default();
    let mut pages = vec![format!("{head}\n{}", body.trim_end())];
    let mut notes = Vec::new();
    for part in msg.attachments() {
        let name = part.attachment_name().unwrap_or("unnamed");
        match part.text_contents() {
            Some(t) if part.is_text() && !part.is_text_html() => {
                pages.push(format!("Attachment: {name}\n\n{}", t.trim_end()))
            }
            _ => notes.push(format!("attachment {name} is not text; not extracted")),
        }
    }
    let headers = serde_json::json!({
        "from": from, "to": to, "cc": cc, "subject": subject,
        "message_id": msg.message_id(),
    });
    Ok(Extracted {
        pages,
        meta: DocMeta {
            title: subject,
            date,
            ..Default::default()
        },
        headers: Some(headers),
        notes,
        drawings: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn headers_body_and_text_attachment() {
        let raw = b"From: Marcus Tennival <m.tennival@paha.example>\r\n\
To: p.lakhdari@mpw.example\r\n\
Date: Tue, 14 May 2019 09:30:00 -0700\r\n\
Subject: Pier 3 ramp\r\n\
MIME-Version: 1.0\r\n\
Content-Type: multipart/mixed; boundary=\"XX\"\r\n\
\r\n\
--XX\r\n\
Content-Type: text/plain; charset=utf-8\r\n\
\r\n\
The ramp inspection is booked.\r\n\
--XX\r\n\
Content-Type: text/plain; name=\"note.txt\"\r\n\
Content-Disposition: attachment; filename=\"note.txt\"\r\n\
\r\n\
Attached note text.\r\n\
--XX--\r\n";
        let e = extract(raw).unwrap();
        assert_eq!(e.meta.title.as_deref(), Some("Pier 3 ramp"));
        assert_eq!(e.meta.date.as_deref(), Some("2019-05-14"));
        assert_eq!(e.pages.len(), 2);
        assert!(e.pages[0].starts_with("From: Marcus Tennival <m.tennival@paha.example>"));
        assert!(e.pages[0].contains("The ramp inspection is booked."));
        assert!(e.pages[1].contains("Attached note text."));
    }

    #[test]
    fn garbage_is_refused() {
        assert!(extract(b"\x00\x01\x02 not a message").is_err());
    }
}
