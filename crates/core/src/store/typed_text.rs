//! Stored values as text that keeps their SQLite type exactly, for change-set
//! files and unique-key bookkeeping: NULL, empty text, an integer and a real
//! never read back as one another.
//!
//! | stored value | text |
//! |---|---|
//! | NULL | (empty) |
//! | INTEGER 42 | `i:42` |
//! | REAL 2.5 | `r:2.5` (shortest text that reads back bit for bit) |
//! | TEXT "abc" (also empty text) | `t:abc`, `t:` |
//! | BLOB | `x:` and lowercase hex |

use rusqlite::types::Value;

/// The text form of a stored value.
pub fn encode(value: &Value) -> String {
    match value {
        Value::Null => String::new(),
        Value::Integer(i) => format!("i:{i}"),
        Value::Real(x) => format!("r:{x:?}"),
        Value::Text(t) => format!("t:{t}"),
        Value::Blob(b) => {
            let mut s = String::with_capacity(2 + 2 * b.len());
            s.push_str("x:");
            for byte in b {
                s.push_str(&format!("{byte:02x}"));
            }
            s
        }
    }
}

/// Read the text form back. The error says what is wrong with the text.
pub fn decode(text: &str) -> Result<Value, String> {
    if text.is_empty() {
        return Ok(Value::Null);
    }
    let (tag, body) = text
        .split_once(':')
        .ok_or_else(|| "has no type tag (i:, r:, t:, x: or empty for no value)".to_owned())?;
    match tag {
        "i" => body
            .parse::<i64>()
            .map(Value::Integer)
            .map_err(|_| "is tagged i: but is not a whole number".to_owned()),
        "r" => {
            // Only plain decimal forms: Rust would also accept "inf" and "NaN".
            let plain = !body.is_empty()
                && body
                    .chars()
                    .all(|c| c.is_ascii_digit() || matches!(c, '-' | '+' | '.' | 'e' | 'E'));
            match body.parse::<f64>() {
                Ok(x) if plain && x.is_finite() => Ok(Value::Real(x)),
                _ => Err("is tagged r: but is not a finite number".to_owned()),
            }
        }
        "t" => Ok(Value::Text(body.to_owned())),
        "x" => {
            if body.len() % 2 != 0 {
                return Err("is tagged x: but has an odd number of hex digits".to_owned());
            }
            (0..body.len())
                .step_by(2)
                .map(|i| u8::from_str_radix(&body[i..i + 2], 16))
                .collect::<Result<Vec<u8>, _>>()
                .map(Value::Blob)
                .map_err(|_| "is tagged x: but is not hex".to_owned())
        }
        _ => Err(format!("has the unknown type tag {tag:?}")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn null_empty_text_integer_and_real_stay_apart() {
        // common practice: each SQLite storage class keeps its own tag.
        let cases = [
            (Value::Null, ""),
            (Value::Text(String::new()), "t:"),
            (Value::Integer(0), "i:0"),
            (Value::Real(0.0), "r:0.0"),
            (Value::Real(-0.0), "r:-0.0"),
            (Value::Text("0".into()), "t:0"),
            (Value::Blob(vec![0, 255]), "x:00ff"),
        ];
        for (value, text) in cases {
            assert_eq!(encode(&value), text);
            let back = decode(text).unwrap();
            match (&back, &value) {
                (Value::Real(a), Value::Real(b)) => assert_eq!(a.to_bits(), b.to_bits()),
                _ => assert_eq!(back, value),
            }
        }
    }

    #[test]
    fn bad_text_is_refused_with_the_reason() {
        assert!(decode("42").unwrap_err().contains("type tag"));
        assert!(decode("i:4.2").unwrap_err().contains("whole number"));
        assert!(decode("r:inf").unwrap_err().contains("finite"));
        assert!(decode("r:NaN").unwrap_err().contains("finite"));
        assert!(decode("q:1").unwrap_err().contains("unknown type tag"));
        assert!(decode("x:abc").unwrap_err().contains("odd"));
    }

    proptest! {
        #[test]
        fn reals_round_trip_bit_for_bit(bits in any::<u64>()) {
            let x = f64::from_bits(bits);
            prop_assume!(x.is_finite());
            let back = decode(&encode(&Value::Real(x))).unwrap();
            prop_assert!(matches!(back, Value::Real(y) if y.to_bits() == x.to_bits()));
        }

        #[test]
        fn any_text_round_trips(s in "\\PC*") {
            prop_assert_eq!(decode(&encode(&Value::Text(s.clone()))).unwrap(), Value::Text(s));
        }

        #[test]
        fn any_integer_round_trips(i in any::<i64>()) {
            prop_assert_eq!(decode(&encode(&Value::Integer(i))).unwrap(), Value::Integer(i));
        }
    }
}
