//! Who is asking: the lab of the request's bearer token.
//!
//! Bound to loopback the service may run open: a request without an `Authorization` header
//! then acts for the lab `local`. Bound to any other address (or with
//! `TRAPWISE_REQUIRE_TOKENS=true`) every `/api/v1` request needs `Authorization: Bearer <token>`.
//! A token that is given is always checked, open or not. Tokens are compared by their SHA-256,
//! the only form the store keeps.

use super::AppState;
use super::problem::AppError;
use axum::extract::FromRequestParts;
use axum::http::header;
use axum::http::request::Parts;

/// The lab a request acts for when the service runs open on loopback.
pub const OPEN_LAB: &str = "local";

/// The token of an `Authorization` value `Bearer <token>`. The scheme name is compared without
/// regard to case (RFC 9110 section 11.1: the auth-scheme is case-insensitive), and is followed
/// by one or more spaces; `None` for another scheme or an empty token.
pub fn bearer_token(value: &str) -> Option<&str> {
    let (scheme, rest) = value.trim_start().split_once(' ')?;
    let token = rest.trim();
    (scheme.eq_ignore_ascii_case("bearer") && !token.is_empty()).then_some(token)
}

/// The lab of the request.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Lab(pub String);

impl FromRequestParts<AppState> for Lab {
    type Rejection = AppError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, AppError> {
        let Some(value) = parts.headers.get(header::AUTHORIZATION) else {
            if state.tokens_required() {
                return Err(AppError::Unauthorized {
                    code: "token-required",
                    detail: "header `Authorization`: this server needs a bearer token; send \
                             `Authorization: Bearer <token>` (make one with `trapwise token \
                             create --lab NAME`)"
                        .into(),
                });
            }
            return Ok(Lab(OPEN_LAB.to_string()));
        };
        let bad = |detail: &str| AppError::Unauthorized {
            code: "bad-token",
            detail: format!("header `Authorization`: {detail}"),
        };
        let text = value
            .to_str()
            .map_err(|_| bad("the value is not visible ASCII; send `Bearer <token>`"))?;
        let secret = bearer_token(text)
            .ok_or_else(|| bad("expected the scheme `Bearer` followed by the token"))?;
        match state.store().lab_for_token(secret).await? {
            Some(lab) => Ok(Lab(lab)),
            None => Err(bad(
                "the token is unknown or revoked; ask the facility for a new one",
            )),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::bearer_token;

    #[test]
    fn the_bearer_scheme_is_read_in_any_case() {
        // RFC 9110 section 11.1: the auth-scheme is case-insensitive.
        for value in ["Bearer abc", "bearer abc", "BEARER abc", "bEaReR   abc "] {
            assert_eq!(bearer_token(value), Some("abc"), "{value}");
        }
        for value in [
            "Basic abc",
            "Bearer",
            "Bearer   ",
            "Bearerabc",
            "Bearers abc",
        ] {
            assert_eq!(bearer_token(value), None, "{value}");
        }
    }
}
