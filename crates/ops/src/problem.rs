//! What went wrong with a call, in the one shape both transports send: a
//! typed [`ProblemCode`] (the server maps it to an HTTP status in one place),
//! a sentence for the person, and the field and value at fault.

use serde::Serialize;

use fieldcage_core::Error;

/// The kinds of problem a call (or the transport around it) can meet; sent
/// as snake_case text (`invalid_value`). A new kind must be given an HTTP
/// status in the server, whose match has no catch-all.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ProblemCode {
    /// The request is not what the operation takes (a missing or mistyped
    /// argument, a body that is not JSON).
    BadRequest,
    /// A value was refused; `field` and `value` name it. Nothing was written.
    InvalidValue,
    /// A record (or a UI file) that does not exist or was deleted.
    NotFound,
    /// The request clashes with the state of the data (a flag that is no
    /// longer raised, a visit that is already there): look again, then retry.
    Conflict,
    /// The sync target cannot be used now (missing, unmounted, read-only);
    /// try again later.
    TargetUnavailable,
    /// Another database uses this device's identity; retrying will not help.
    DeviceClash,
    /// There is no operation of that name.
    UnknownOperation,
    /// The server refused a request for a host name that is not its own.
    ForbiddenHost,
    /// The server refused a request from another site's page.
    ForbiddenOrigin,
    /// The LAN token is missing or wrong.
    Unauthorized,
    /// A write not sent as `application/json`.
    UnsupportedMediaType,
    /// Something that should not happen (a bug, a damaged database): the
    /// message says what.
    Internal,
}

impl ProblemCode {
    /// The code as sent (`invalid_value`).
    pub fn as_str(self) -> &'static str {
        match self {
            ProblemCode::BadRequest => "bad_request",
            ProblemCode::InvalidValue => "invalid_value",
            ProblemCode::NotFound => "not_found",
            ProblemCode::Conflict => "conflict",
            ProblemCode::TargetUnavailable => "target_unavailable",
            ProblemCode::DeviceClash => "device_clash",
            ProblemCode::UnknownOperation => "unknown_operation",
            ProblemCode::ForbiddenHost => "forbidden_host",
            ProblemCode::ForbiddenOrigin => "forbidden_origin",
            ProblemCode::Unauthorized => "unauthorized",
            ProblemCode::UnsupportedMediaType => "unsupported_media_type",
            ProblemCode::Internal => "internal",
        }
    }
}

impl std::fmt::Display for ProblemCode {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// What went wrong with a call, in the one shape both transports send.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Problem {
    /// What kind of problem: what the caller may do about it.
    pub code: ProblemCode,
    /// A sentence for the person.
    pub message: String,
    /// The field at fault (`census.alive`, or a request path like `alive`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub field: Option<String>,
    /// The refused value, when there is one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub value: Option<String>,
}

impl Problem {
    /// A problem of `code` with a message and nothing at fault named.
    pub fn new(code: ProblemCode, message: impl Into<String>) -> Problem {
        Problem {
            code,
            message: message.into(),
            field: None,
            value: None,
        }
    }

    /// The request is not what the operation takes.
    pub fn bad_request(field: Option<String>, message: String) -> Problem {
        Problem {
            code: ProblemCode::BadRequest,
            message,
            field,
            value: None,
        }
    }
}

impl From<Error> for Problem {
    fn from(e: Error) -> Problem {
        let message = e.to_string();
        match e {
            Error::InvalidValue {
                table,
                field,
                value,
                reason,
            } => Problem {
                code: ProblemCode::InvalidValue,
                // In the sheet's words where the crew fills the field in
                // ("Dead: 1.5 is not a whole number"); the field's stored
                // name stays in `field` for the analyst and the API.
                message: match crate::fields::label(&field) {
                    Some(label) => format!("{label}: {value} {reason}"),
                    None => format!("{table}.{field} {reason} (value: {value})"),
                },
                field: Some(format!("{table}.{field}")),
                value: Some(value),
            },
            Error::Stale {
                table,
                field,
                stored,
                seen,
                value,
            } => Problem {
                code: ProblemCode::Conflict,
                message: format!(
                    "{}: changed meanwhile (another tab or tablet) to {stored}; you saw {seen} \
                     and entered {value}, which was not saved. Look at the value now shown and \
                     enter yours again if it is still right.",
                    crate::fields::label(&field).unwrap_or(&field)
                ),
                field: Some(format!("{table}.{field}")),
                value: Some(value),
            },
            Error::NotFound { table, id } => Problem {
                code: ProblemCode::NotFound,
                message,
                field: Some(format!("{table}.id")),
                value: Some(id),
            },
            Error::State(_) => Problem {
                code: ProblemCode::Conflict,
                message,
                field: None,
                value: None,
            },
            // A bug or a damaged database: not the person's conflict.
            Error::Invariant(_) => Problem {
                code: ProblemCode::Internal,
                message,
                field: None,
                value: None,
            },
            Error::Import { file, column, .. } => Problem {
                code: ProblemCode::InvalidValue,
                message,
                field: Some(format!("{file}:{column}")),
                value: None,
            },
            Error::TargetUnavailable { target, .. } => Problem {
                code: ProblemCode::TargetUnavailable,
                message,
                field: Some("device.sync_target".to_owned()),
                value: Some(target.display().to_string()),
            },
            Error::DeviceClash(_) => Problem {
                code: ProblemCode::DeviceClash,
                message,
                field: None,
                value: None,
            },
            _ => Problem {
                code: ProblemCode::Internal,
                message,
                field: None,
                value: None,
            },
        }
    }
}
