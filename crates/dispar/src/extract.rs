//! Request extractors that answer in our problem shape instead of the framework's
//! plain text: [`Body`] (raw bytes plus media type; [`Body::json`] checks content
//! type, syntax, unknown fields and types, each with a JSON pointer), and
//! [`ApiQuery`] (query strings).

use axum::body::Bytes;
use axum::extract::{FromRequest, FromRequestParts, Request};
use axum::http::header;
use axum::http::request::Parts;
use serde::de::DeserializeOwned;

use crate::error::{ApiError, ErrorItem, ProblemKind};

/// The media types a body may have, as far as this API cares.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MediaType {
    /// `application/json` or any `application/*+json`.
    Json,
    /// `text/csv`.
    Csv,
}

/// A request body read to the end within the size limit, with its media type.
#[derive(Debug, Clone)]
pub struct Body {
    /// The media type from `Content-Type`, when it is one we know.
    pub media_type: Option<MediaType>,
    /// The `Content-Type` header as sent (for messages).
    pub content_type: Option<String>,
    /// The bytes.
    pub bytes: Bytes,
}

/// Reads the media type of a `Content-Type` value (parameters such as `charset` are
/// accepted; a `charset` other than UTF-8 is not, and gives `None`).
pub fn media_type(content_type: &str) -> Option<MediaType> {
    let mut parts = content_type.split(';');
    let essence = parts.next().unwrap_or("").trim().to_ascii_lowercase();
    for param in parts {
        if let Some((name, value)) = param.split_once('=')
            && name.trim().eq_ignore_ascii_case("charset")
        {
            let value = value.trim().trim_matches('"');
            if !value.eq_ignore_ascii_case("utf-8") && !value.eq_ignore_ascii_case("utf8") {
                return None;
            }
        }
    }
    if essence == "application/json"
        || (essence.starts_with("application/") && essence.ends_with("+json"))
    {
        Some(MediaType::Json)
    } else if essence == "text/csv" {
        Some(MediaType::Csv)
    } else {
        None
    }
}

impl<S: Send + Sync> FromRequest<S> for Body {
    type Rejection = ApiError;

    async fn from_request(req: Request, state: &S) -> Result<Self, Self::Rejection> {
        let content_type = req
            .headers()
            .get(header::CONTENT_TYPE)
            .and_then(|v| v.to_str().ok())
            .map(str::to_owned);
        let media_type = content_type.as_deref().and_then(media_type);
        // `Bytes` honours the router's `DefaultBodyLimit` (set from --max-body-bytes).
        let bytes = Bytes::from_request(req, state).await.map_err(|rejection| {
            if rejection.status() == axum::http::StatusCode::PAYLOAD_TOO_LARGE {
                too_large()
            } else {
                ApiError::new(
                    ProblemKind::BadRequest,
                    "The request body could not be read.",
                )
                .with_cause(rejection.body_text())
            }
        })?;
        Ok(Body {
            media_type,
            content_type,
            bytes,
        })
    }
}

impl Body {
    /// The body as JSON of type `T`: 415 if it is not declared JSON, 400 for bad
    /// syntax, 422 naming each bad field with a JSON pointer (unknown fields are
    /// refused by the target types' `deny_unknown_fields`).
    pub fn json<T: DeserializeOwned>(&self) -> Result<T, ApiError> {
        if self.media_type != Some(MediaType::Json) {
            return Err(unsupported(
                self.content_type.as_deref(),
                "application/json",
            ));
        }
        parse_json(&self.bytes)
    }
}

/// The 413 problem.
pub fn too_large() -> ApiError {
    ApiError::new(
        ProblemKind::PayloadTooLarge,
        "The request body is larger than this server accepts; send smaller batches.",
    )
    .with_error(ErrorItem::general(
        "too-large",
        "the body exceeds the size limit",
    ))
}

/// The 415 problem for an endpoint taking the given media types.
pub fn unsupported(content_type: Option<&str>, accepted: &str) -> ApiError {
    let detail = match content_type {
        Some(ct) => format!("A body of type {ct:?} is not accepted here; send {accepted}."),
        None => format!("The request has no Content-Type; send {accepted}."),
    };
    ApiError::new(ProblemKind::UnsupportedMediaType, detail).with_error(ErrorItem::header(
        "content-type",
        "unsupported-media-type",
        format!("expected {accepted}"),
    ))
}

/// Parses `bytes` as JSON into `T`, turning errors into problems with JSON pointers.
pub fn parse_json<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, ApiError> {
    // serde's derived structs also accept a JSON array of the fields in order; every
    // body of this API is an object, so an array is refused before it can be read.
    if bytes.trim_ascii_start().first() == Some(&b'[') {
        return Err(not_an_object(String::new()));
    }
    if let Some((pointer, key)) = duplicate_member(bytes) {
        return Err(ApiError::validation(
            "The request body has invalid fields.",
            vec![ErrorItem::pointer(
                pointer,
                "duplicate",
                format!("{key:?} appears twice; name each member once"),
            )],
        ));
    }
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let value = serde_path_to_error::deserialize(&mut de).map_err(|e| {
        let pointer = pointer_of(e.path());
        let inner = e.into_inner();
        // serde stops at the first problem, which may be a field error early in a body
        // that is not JSON at all further on; a body that is not JSON is 400 first.
        if inner.classify() == serde_json::error::Category::Data
            && let Err(syntax) = serde_json::from_slice::<serde::de::IgnoredAny>(bytes)
        {
            return json_error(String::new(), syntax);
        }
        json_error(pointer, inner)
    })?;
    de.end().map_err(|e| json_error(String::new(), e))?;
    Ok(value)
}

/// The pointer and name of the first object member that appears twice in its object,
/// if any (None also for a body that is not JSON: the parse that follows says why).
/// JSON allows duplicate names and serde keeps the last, which would let one value
/// replace another unseen, also inside values first read as `serde_json::Value`.
fn duplicate_member(bytes: &[u8]) -> Option<(String, String)> {
    use serde::de::{DeserializeSeed, MapAccess, SeqAccess, Visitor};
    use std::fmt;

    /// Walks one JSON value at `path`; on a duplicate sets `found` and fails the parse.
    struct Walk<'a> {
        path: String,
        found: &'a std::cell::RefCell<Option<(String, String)>>,
    }
    impl<'de> DeserializeSeed<'de> for Walk<'_> {
        type Value = ();
        fn deserialize<D: serde::Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
            d.deserialize_any(self)
        }
    }
    impl<'de> Visitor<'de> for Walk<'_> {
        type Value = ();
        fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
            f.write_str("any JSON value")
        }
        fn visit_bool<E>(self, _: bool) -> Result<(), E> {
            Ok(())
        }
        fn visit_i64<E>(self, _: i64) -> Result<(), E> {
            Ok(())
        }
        fn visit_u64<E>(self, _: u64) -> Result<(), E> {
            Ok(())
        }
        fn visit_f64<E>(self, _: f64) -> Result<(), E> {
            Ok(())
        }
        fn visit_str<E>(self, _: &str) -> Result<(), E> {
            Ok(())
        }
        fn visit_unit<E>(self) -> Result<(), E> {
            Ok(())
        }
        fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
            let mut i = 0usize;
            while seq
                .next_element_seed(Walk {
                    path: format!("{}/{i}", self.path),
                    found: self.found,
                })?
                .is_some()
            {
                i += 1;
            }
            Ok(())
        }
        fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<(), A::Error> {
            let mut seen = std::collections::HashSet::new();
            while let Some(key) = map.next_key::<String>()? {
                let path = format!(
                    "{}/{}",
                    self.path,
                    dispar_core::error::pointer_segment(&key)
                );
                if !seen.insert(key.clone()) {
                    *self.found.borrow_mut() = Some((path, key));
                    return Err(serde::de::Error::custom("duplicate member"));
                }
                map.next_value_seed(Walk {
                    path,
                    found: self.found,
                })?;
            }
            Ok(())
        }
    }
    let found = std::cell::RefCell::new(None);
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let _ = Walk {
        path: String::new(),
        found: &found,
    }
    .deserialize(&mut de);
    let _ = de.end();
    found.into_inner()
}

/// Deserializes `value` into `T`; errors get JSON pointers below `prefix`.
pub fn from_value<T: DeserializeOwned>(
    value: serde_json::Value,
    prefix: &str,
) -> Result<T, Box<ErrorItem>> {
    if value.is_array() {
        return Err(Box::new(not_an_object_item(prefix.to_owned())));
    }
    serde_path_to_error::deserialize(value).map_err(|e| {
        let pointer = format!("{prefix}{}", pointer_of(e.path()));
        Box::new(data_error_item(pointer, &e.into_inner()))
    })
}

/// The 422 problem for an array where the API takes an object.
fn not_an_object(pointer: String) -> ApiError {
    ApiError::validation(
        "The request body has invalid fields.",
        vec![not_an_object_item(pointer)],
    )
}

fn not_an_object_item(pointer: String) -> ErrorItem {
    ErrorItem::pointer(
        pointer,
        "invalid-type",
        "invalid type: array, expected a JSON object",
    )
}

/// The RFC 6901 pointer of a serde path (`""` for the root).
fn pointer_of(path: &serde_path_to_error::Path) -> String {
    use serde_path_to_error::Segment;
    let mut out = String::new();
    for segment in path {
        match segment {
            Segment::Seq { index } => {
                out.push('/');
                out.push_str(&index.to_string());
            }
            Segment::Map { key } => {
                out.push('/');
                out.push_str(&dispar_core::error::pointer_segment(key));
            }
            Segment::Enum { .. } | Segment::Unknown => {}
        }
    }
    out
}

fn json_error(pointer: String, e: serde_json::Error) -> ApiError {
    use serde_json::error::Category;
    match e.classify() {
        Category::Syntax | Category::Eof | Category::Io => {
            let message = format!(
                "invalid JSON at line {} column {}: {}",
                e.line(),
                e.column(),
                strip_position(&e.to_string())
            );
            ApiError::new(
                ProblemKind::MalformedBody,
                "The request body is not valid JSON.",
            )
            .with_error(ErrorItem::pointer(pointer, "invalid-json", message))
        }
        Category::Data => {
            let item = data_error_item(pointer, &e);
            ApiError::validation("The request body has invalid fields.", vec![item])
        }
    }
}

/// serde_json appends " at line L column C"; the message has its own position.
fn strip_position(message: &str) -> &str {
    match message.rfind(" at line ") {
        Some(i) => &message[..i],
        None => message,
    }
}

/// Classifies a serde data error; unknown and missing fields get the field appended
/// to the pointer (serde reports them at the enclosing object).
fn data_error_item(pointer: String, e: &serde_json::Error) -> ErrorItem {
    let text = e.to_string();
    let message = strip_position(&text).to_owned();
    if let Some(field) = backticked_after(&message, "unknown field ") {
        let pointer = append_field(&pointer, &field);
        return ErrorItem::pointer(
            pointer,
            "unknown-field",
            format!("{field:?} is not a field here ({message})"),
        );
    }
    if let Some(field) = backticked_after(&message, "missing field ") {
        let pointer = append_field(&pointer, &field);
        return ErrorItem::pointer(pointer, "required", format!("{field:?} is required"));
    }
    // A member named twice: point at it, not at the object holding it.
    for prefix in ["duplicate field ", "duplicate category "] {
        if let Some(field) = backticked_after(&message, prefix) {
            let pointer = if pointer
                .ends_with(&format!("/{}", dispar_core::error::pointer_segment(&field)))
            {
                pointer
            } else {
                append_field(&pointer, &field)
            };
            return ErrorItem::pointer(
                pointer,
                "duplicate",
                format!("{field:?} appears twice; name each member once"),
            );
        }
    }
    let reason = if message.starts_with("invalid type") {
        "invalid-type"
    } else if message.starts_with("invalid length") {
        "invalid-length"
    } else {
        "invalid-value"
    };
    ErrorItem::pointer(pointer, reason, message)
}

/// For a message like "unknown field `foo`, expected ...", the text between the first
/// pair of backticks after `lead`.
fn backticked_after(message: &str, lead: &str) -> Option<String> {
    let rest = message.strip_prefix(lead)?;
    let rest = rest.strip_prefix('`')?;
    let end = rest.find('`')?;
    Some(rest[..end].to_owned())
}

/// Appends `field` to `pointer` unless the pointer already ends with it (serde's
/// path tracker sometimes has already recorded the key).
fn append_field(pointer: &str, field: &str) -> String {
    let segment = dispar_core::error::pointer_segment(field);
    if pointer.rsplit('/').next() == Some(segment.as_str()) && !pointer.is_empty() {
        pointer.to_owned()
    } else {
        format!("{pointer}/{segment}")
    }
}

/// The path's parameters (`{site}`, `{line}`, `{date}`...) as `T`, like axum's `Path`,
/// but a segment that is not UTF-8 once percent-decoded (`S%FF1`) is a 400 naming the
/// parameter instead of axum's bare "Bad Request".
#[derive(Debug, Clone)]
pub struct Segments<T>(pub T);

impl<S: Send + Sync, T: DeserializeOwned + Send> FromRequestParts<S> for Segments<T> {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &S) -> Result<Self, Self::Rejection> {
        use axum::extract::path::{ErrorKind, Path};
        use axum::extract::rejection::PathRejection;
        match Path::<T>::from_request_parts(parts, state).await {
            Ok(Path(value)) => Ok(Segments(value)),
            Err(PathRejection::FailedToDeserializePathParams(e)) => {
                let item = match e.kind() {
                    ErrorKind::InvalidUtf8InPathParam { key } => ErrorItem::parameter(
                        key.clone(),
                        "invalid-utf8",
                        format!(
                            "the path segment {{{key}}} is not UTF-8 once its percent-escapes are decoded"
                        ),
                    ),
                    ErrorKind::ParseErrorAtKey { key, .. }
                    | ErrorKind::DeserializeError { key, .. } => {
                        ErrorItem::parameter(key.clone(), "invalid-value", e.body_text())
                    }
                    _ => ErrorItem::general("invalid-path", e.body_text()),
                };
                Err(
                    ApiError::new(ProblemKind::BadRequest, "The request path cannot be read.")
                        .with_error(item),
                )
            }
            Err(other) => Err(ApiError::new(ProblemKind::BadRequest, other.body_text())),
        }
    }
}

/// A query string deserialized into `T`; errors are 422 naming the parameter.
#[derive(Debug, Clone)]
pub struct ApiQuery<T>(pub T);

impl<S: Send + Sync, T: DeserializeOwned> FromRequestParts<S> for ApiQuery<T> {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, _state: &S) -> Result<Self, Self::Rejection> {
        // Query types in this crate hold strings and parse values themselves, so the
        // only errors here are unknown, repeated or undecodable parameters.
        serde_urlencoded::from_str(parts.uri.query().unwrap_or(""))
            .map(ApiQuery)
            .map_err(|e| query_error(&e.to_string()))
    }
}

/// `query` deserialized into `T` for an endpoint that takes the parameters
/// `accepted` (when `T` holds more, for several endpoints): another name is refused
/// as serde refuses an unknown field, with the same message, so the answer is the one
/// [`ApiQuery`] gives for a type of exactly those fields.
pub fn query_of<T: DeserializeOwned>(
    query: &str,
    accepted: &'static [&'static str],
) -> Result<T, ApiError> {
    use serde::de::Error as _;
    // In order, as serde meets them: the first unknown or repeated name is the error.
    let mut seen: Vec<String> = Vec::new();
    for (name, _) in form_urlencoded::parse(query.as_bytes()) {
        let message = if !accepted.contains(&name.as_ref()) {
            serde::de::value::Error::unknown_field(&name, accepted).to_string()
        } else if seen.iter().any(|s| *s == name) {
            serde::de::value::Error::duplicate_field(accepted_name(accepted, &name)).to_string()
        } else {
            seen.push(name.into_owned());
            continue;
        };
        return Err(query_error(&message));
    }
    serde_urlencoded::from_str(query).map_err(|e| query_error(&e.to_string()))
}

/// The `'static` spelling of `name` in `accepted` (serde's messages take one).
fn accepted_name(accepted: &'static [&'static str], name: &str) -> &'static str {
    accepted.iter().find(|a| **a == name).copied().unwrap_or("")
}

/// The 422 of a query string serde could not read, naming the parameter its message
/// names.
fn query_error(message: &str) -> ApiError {
    let item = if let Some(field) = backticked_after(message, "unknown field ") {
        ErrorItem::parameter(field, "unknown-parameter", message)
    } else if let Some(field) = backticked_after(message, "duplicate field ") {
        ErrorItem::parameter(field, "duplicate", message)
    } else if let Some(field) = backticked_after(message, "missing field ") {
        ErrorItem::parameter(field, "required", message)
    } else {
        ErrorItem::general("invalid-query", message)
    };
    ApiError::validation("The query string has invalid parameters.", vec![item])
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde::Deserialize;

    #[derive(Debug, Deserialize)]
    #[serde(deny_unknown_fields)]
    #[allow(dead_code)]
    struct Rec {
        inspected: u64,
        defective: u64,
    }

    #[derive(Debug, Deserialize)]
    #[serde(deny_unknown_fields)]
    #[allow(dead_code)]
    struct Batch {
        records: Vec<Rec>,
    }

    fn err<T: DeserializeOwned + std::fmt::Debug>(json: &str) -> ApiError {
        match parse_json::<T>(json.as_bytes()) {
            Ok(v) => panic!("expected an error for {json}, got {v:?}"),
            Err(e) => e,
        }
    }

    #[test]
    fn unknown_fields_are_named_by_pointer() {
        let e = err::<Batch>(
            r#"{"records":[{"inspected":1,"defective":0},{"inspected":1,"defective":0,"colour":"red"}]}"#,
        );
        assert_eq!(e.status().as_u16(), 422);
        assert_eq!(e.errors()[0].pointer.as_deref(), Some("/records/1/colour"));
        assert_eq!(e.errors()[0].reason, "unknown-field");
    }

    #[test]
    fn missing_fields_and_wrong_types_are_named_by_pointer() {
        let e = err::<Batch>(r#"{"records":[{"inspected":1}]}"#);
        assert_eq!(
            e.errors()[0].pointer.as_deref(),
            Some("/records/0/defective")
        );
        assert_eq!(e.errors()[0].reason, "required");
        let e = err::<Batch>(r#"{"records":[{"inspected":"many","defective":0}]}"#);
        assert_eq!(
            e.errors()[0].pointer.as_deref(),
            Some("/records/0/inspected")
        );
        assert_eq!(e.errors()[0].reason, "invalid-type");
    }

    #[test]
    fn arrays_in_place_of_objects_are_refused() {
        #[derive(Debug, serde::Deserialize)]
        #[allow(dead_code)]
        struct Site {
            name: String,
        }
        let e = err::<Site>(r#" ["Array Site"]"#);
        assert_eq!(e.status(), axum::http::StatusCode::UNPROCESSABLE_ENTITY);
        assert_eq!(e.errors()[0].reason, "invalid-type");
        let item = from_value::<Site>(serde_json::json!(["x"]), "/records/2")
            .expect_err("an array is not a record");
        assert_eq!(item.reason, "invalid-type");
        assert_eq!(item.pointer.as_deref(), Some("/records/2"));
    }

    #[test]
    fn syntax_errors_are_400_with_a_position() {
        let e = err::<Batch>(r#"{"records": [}"#);
        assert_eq!(e.status().as_u16(), 400);
        assert_eq!(e.errors()[0].reason, "invalid-json");
        assert!(e.errors()[0].message.contains("line 1"), "{:?}", e.errors());
        let e = err::<Batch>(r#"{"records": []} trailing"#);
        assert_eq!(e.status().as_u16(), 400);
    }

    /// The fields of one endpoint, refusing the rest as the server's query types do.
    #[derive(Debug, Deserialize)]
    #[serde(deny_unknown_fields)]
    #[allow(dead_code)]
    struct Narrow {
        period: Option<String>,
        alpha: Option<String>,
    }

    /// A type holding the fields of two endpoints, refusing nothing.
    #[derive(Debug, Deserialize)]
    #[allow(dead_code)]
    struct Wide {
        period: Option<String>,
        from: Option<String>,
        alpha: Option<String>,
    }

    const NARROW: &[&str] = &["period", "alpha"];

    #[test]
    fn an_accepted_list_refuses_parameters_exactly_as_a_narrow_type_does() {
        let narrow = |q: &str| -> ApiError {
            serde_urlencoded::from_str::<Narrow>(q)
                .map(|_| ())
                .map_err(|e| query_error(&e.to_string()))
                .unwrap_err()
        };
        for q in [
            "period=2026-03&from=2026-01",
            "colour=red&alpha=0.05",
            "alpha=0.05&alpha=0.01",
            "alpha=0.05&alpha=0.01&colour=red",
            "colour=red&alpha=0.05&alpha=0.01",
        ] {
            let wide = query_of::<Wide>(q, NARROW).unwrap_err();
            assert_eq!(wide.body(), narrow(q).body(), "{q}");
        }
        let ok = query_of::<Wide>("alpha=0.05&period=2026-03", NARROW).unwrap();
        assert_eq!(ok.alpha.as_deref(), Some("0.05"));
        let e = query_of::<Wide>("from=2026-01", NARROW).unwrap_err();
        assert_eq!(e.errors()[0].parameter.as_deref(), Some("from"));
        assert_eq!(e.errors()[0].reason, "unknown-parameter");
    }

    #[test]
    fn media_types_are_read_with_parameters() {
        assert_eq!(media_type("application/json"), Some(MediaType::Json));
        assert_eq!(
            media_type("application/json; charset=utf-8"),
            Some(MediaType::Json)
        );
        assert_eq!(
            media_type("Application/Merge-Patch+JSON"),
            Some(MediaType::Json)
        );
        assert_eq!(
            media_type("text/csv; charset=UTF-8; header=present"),
            Some(MediaType::Csv)
        );
        assert_eq!(media_type("text/csv; charset=latin1"), None);
        assert_eq!(media_type("text/plain"), None);
    }
}
