//! Signature options taken from the environment, shared by the acceptance run and the stage
//! benchmark so that both can compare variants: `TIEMARK_K` (neighbours), `TIEMARK_LEAVE_OUT`
//! (subset depth), `TIEMARK_H` (harmonics, e.g. `1,2`) and `TIEMARK_KEY_SPACE` (`disc` or
//! `sphere`). What is unset keeps the tool's automatic choice.

use tiemark::signatures::{KeySpace, SignatureChoice};

fn var<T: std::str::FromStr>(name: &str) -> Option<T> {
    let v = std::env::var(name).ok()?;
    Some(
        v.parse()
            .unwrap_or_else(|_| panic!("{name}={v:?} is not a valid value")),
    )
}

/// The tool's default signature choice with the environment's overrides.
pub fn signature_choice() -> SignatureChoice {
    let mut choice = SignatureChoice::default();
    if let Some(k) = var("TIEMARK_K") {
        choice.neighbours = Some(k);
    }
    if let Some(l) = var("TIEMARK_LEAVE_OUT") {
        choice.leave_out = Some(l);
    }
    if let Ok(h) = std::env::var("TIEMARK_H") {
        choice.harmonics = h
            .split(',')
            .map(|j| {
                j.trim()
                    .parse()
                    .unwrap_or_else(|_| panic!("TIEMARK_H={h:?} is not a list of harmonics"))
            })
            .collect();
    }
    match std::env::var("TIEMARK_KEY_SPACE").as_deref() {
        Ok("disc") => choice.key_space = KeySpace::Disc,
        Ok("sphere") => choice.key_space = KeySpace::Sphere,
        Ok(other) => panic!("TIEMARK_KEY_SPACE must be disc or sphere (got {other:?})"),
        Err(_) => {}
    }
    choice
}
