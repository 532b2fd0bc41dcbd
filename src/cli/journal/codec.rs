//! The outcome of one (model, subject) pair as a journal record, without loss.
//!
//! Every number is written as the 16 hex digits of its IEEE 754 bit pattern, so NaN, infinities,
//! −0 and every last bit come back as they were: the tables built from journalled fits are those
//! of an uninterrupted run byte for byte. Both directions destructure or build the whole
//! [`SubjectFit`], so a new field cannot be forgotten here without a compile error.

use crate::fit::{Outcome, ParameterEstimate, Skipped, SubjectFit};
use crate::likelihood::DataMismatch;
use serde_json::{Map, Value, json};

/// The record of `outcome`.
pub fn to_record(outcome: &Outcome) -> Value {
    match outcome {
        Ok(fit) => json!({
            "model": fit.model,
            "subject": fit.subject,
            "fit": fit_value(fit),
        }),
        Err(skipped) => json!({
            "model": skipped.model,
            "subject": skipped.reason.subject,
            "not_fitted": skipped.reason.message,
        }),
    }
}

/// The outcome of a record written by [`to_record`]; the error says what is missing or wrong.
pub fn from_record(record: &Value) -> Result<Outcome, String> {
    let fields = Fields::of(record)?;
    let model = fields.text("model")?;
    let subject = fields.text("subject")?;
    if let Some(message) = fields.0.get("not_fitted") {
        let message = message
            .as_str()
            .ok_or("field not_fitted: expected text")?
            .to_string();
        return Ok(Err(Skipped {
            model,
            reason: DataMismatch { subject, message },
        }));
    }
    let fit = fit_from(&Fields::of(fields.get("fit")?)?)?;
    if fit.model != model || fit.subject != subject {
        return Err("the fit is of another model or subject than its record".to_string());
    }
    Ok(Ok(fit))
}

fn fit_value(fit: &SubjectFit) -> Value {
    let SubjectFit {
        subject,
        group,
        model,
        scores_response_times,
        n_trials,
        n_params,
        log_likelihood,
        log_prior,
        aic,
        bic,
        starts_at_best,
        starts,
        converged,
        status,
        hessian_ok,
        termination,
        gradient_norm,
        estimates,
        theta,
        covariance_theta,
        log_evidence,
    } = fit;
    json!({
        "subject": subject,
        "group": group,
        "model": model,
        "scores_response_times": scores_response_times,
        "n_trials": n_trials,
        "n_params": n_params,
        "log_likelihood": bits(*log_likelihood),
        "log_prior": bits(*log_prior),
        "aic": bits(*aic),
        "bic": bits(*bic),
        "starts_at_best": starts_at_best,
        "starts": starts,
        "converged": converged,
        "status": status,
        "hessian_ok": hessian_ok,
        "termination": termination,
        "gradient_norm": bits(*gradient_norm),
        "estimates": estimates.iter().map(estimate_value).collect::<Vec<_>>(),
        "theta": numbers(theta),
        "covariance_theta": covariance_theta
            .as_ref()
            .map(|rows| rows.iter().map(|r| numbers(r)).collect::<Vec<_>>()),
        "log_evidence": log_evidence.map(bits),
    })
}

fn fit_from(f: &Fields<'_>) -> Result<SubjectFit, String> {
    Ok(SubjectFit {
        subject: f.text("subject")?,
        group: f.text("group")?,
        model: f.text("model")?,
        scores_response_times: f.flag("scores_response_times")?,
        n_trials: f.count("n_trials")?,
        n_params: f.count("n_params")?,
        log_likelihood: f.number("log_likelihood")?,
        log_prior: f.number("log_prior")?,
        aic: f.number("aic")?,
        bic: f.number("bic")?,
        starts_at_best: f.count("starts_at_best")?,
        starts: f.count("starts")?,
        converged: f.flag("converged")?,
        status: f.text("status")?,
        hessian_ok: f.flag("hessian_ok")?,
        termination: f.text("termination")?,
        gradient_norm: f.number("gradient_norm")?,
        estimates: f
            .list("estimates")?
            .iter()
            .map(|e| estimate_from(&Fields::of(e)?))
            .collect::<Result<_, String>>()?,
        theta: f.numbers("theta")?,
        covariance_theta: f
            .optional("covariance_theta")
            .map(|rows| {
                rows.as_array()
                    .ok_or("field covariance_theta: expected a list of rows")?
                    .iter()
                    .map(|row| numbers_from("covariance_theta", row))
                    .collect::<Result<Vec<_>, String>>()
            })
            .transpose()?,
        log_evidence: f.optional_number("log_evidence")?,
    })
}

fn estimate_value(estimate: &ParameterEstimate) -> Value {
    let ParameterEstimate {
        name,
        estimate,
        std_error,
        interval,
        at_bound,
        fixed,
    } = estimate;
    json!({
        "name": name,
        "estimate": bits(*estimate),
        "std_error": std_error.map(bits),
        "interval": interval.map(|(lo, hi)| [bits(lo), bits(hi)]),
        "at_bound": at_bound,
        "fixed": fixed,
    })
}

fn estimate_from(f: &Fields<'_>) -> Result<ParameterEstimate, String> {
    let interval = match f.optional("interval") {
        None => None,
        Some(pair) => match numbers_from("interval", pair)?[..] {
            [lo, hi] => Some((lo, hi)),
            _ => return Err("field interval: expected two numbers".to_string()),
        },
    };
    Ok(ParameterEstimate {
        name: f.text("name")?,
        estimate: f.number("estimate")?,
        std_error: f.optional_number("std_error")?,
        interval,
        at_bound: f.flag("at_bound")?,
        fixed: f.flag("fixed")?,
    })
}

/// The bit pattern of `x` as 16 hex digits.
fn bits(x: f64) -> String {
    format!("{:016x}", x.to_bits())
}

fn numbers(xs: &[f64]) -> Vec<String> {
    xs.iter().map(|&x| bits(x)).collect()
}

/// The number whose bit pattern `value` holds.
fn number_from(name: &str, value: &Value) -> Result<f64, String> {
    value
        .as_str()
        .filter(|t| t.len() == 16)
        .and_then(|t| u64::from_str_radix(t, 16).ok())
        .map(f64::from_bits)
        .ok_or_else(|| format!("field {name}: expected a number's 16 hex digits"))
}

fn numbers_from(name: &str, value: &Value) -> Result<Vec<f64>, String> {
    value
        .as_array()
        .ok_or_else(|| format!("field {name}: expected a list"))?
        .iter()
        .map(|x| number_from(name, x))
        .collect()
}

/// The fields of a record's object.
struct Fields<'a>(&'a Map<String, Value>);

impl<'a> Fields<'a> {
    fn of(value: &'a Value) -> Result<Self, String> {
        value
            .as_object()
            .map(Fields)
            .ok_or_else(|| "expected an object".to_string())
    }

    fn get(&self, name: &str) -> Result<&'a Value, String> {
        self.0.get(name).ok_or_else(|| format!("no field {name}"))
    }

    /// A field that is missing or null is None.
    fn optional(&self, name: &str) -> Option<&'a Value> {
        self.0.get(name).filter(|v| !v.is_null())
    }

    fn text(&self, name: &str) -> Result<String, String> {
        self.get(name)?
            .as_str()
            .map(str::to_string)
            .ok_or_else(|| format!("field {name}: expected text"))
    }

    fn flag(&self, name: &str) -> Result<bool, String> {
        self.get(name)?
            .as_bool()
            .ok_or_else(|| format!("field {name}: expected true or false"))
    }

    fn count(&self, name: &str) -> Result<usize, String> {
        self.get(name)?
            .as_u64()
            .and_then(|n| usize::try_from(n).ok())
            .ok_or_else(|| format!("field {name}: expected a count"))
    }

    fn list(&self, name: &str) -> Result<&'a Vec<Value>, String> {
        self.get(name)?
            .as_array()
            .ok_or_else(|| format!("field {name}: expected a list"))
    }

    fn number(&self, name: &str) -> Result<f64, String> {
        number_from(name, self.get(name)?)
    }

    fn optional_number(&self, name: &str) -> Result<Option<f64>, String> {
        self.optional(name)
            .map(|v| number_from(name, v))
            .transpose()
    }

    fn numbers(&self, name: &str) -> Result<Vec<f64>, String> {
        numbers_from(name, self.get(name)?)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// IEEE 754 bit patterns (common practice): every value, NaN payloads and −0 included, comes
    /// back with the same bits through the record's JSON text.
    #[test]
    fn numbers_come_back_bit_for_bit() {
        let values = [
            0.1 + 0.2,
            -0.0,
            f64::MIN_POSITIVE / 3.0,
            f64::MAX,
            f64::NEG_INFINITY,
            f64::from_bits(0x7ff8_0000_dead_beef),
            std::f64::consts::PI,
        ];
        let estimate = |x: f64| ParameterEstimate {
            name: "p".to_string(),
            estimate: x,
            std_error: Some(x),
            interval: Some((x, -x)),
            at_bound: false,
            fixed: true,
        };
        for &x in &values {
            let fit = SubjectFit {
                subject: "s 1".to_string(),
                group: "g".to_string(),
                model: "m".to_string(),
                scores_response_times: true,
                n_trials: 240,
                n_params: 1,
                log_likelihood: x,
                log_prior: x,
                aic: x,
                bic: x,
                starts_at_best: 2,
                starts: 3,
                converged: false,
                status: "not converged: \"quoted\"\n".to_string(),
                hessian_ok: true,
                termination: "t".to_string(),
                gradient_norm: x,
                estimates: vec![estimate(x)],
                theta: vec![x, 1.0],
                covariance_theta: Some(vec![vec![x]]),
                log_evidence: Some(x),
            };
            let text = to_record(&Ok(fit.clone())).to_string();
            let back = from_record(&serde_json::from_str(&text).unwrap())
                .unwrap()
                .unwrap();
            let same = |a: f64, b: f64| a.to_bits() == b.to_bits();
            assert!(same(back.log_likelihood, x) && same(back.gradient_norm, x));
            assert!(same(back.estimates[0].interval.unwrap().1, -x));
            assert!(same(back.covariance_theta.as_ref().unwrap()[0][0], x));
            assert_eq!(back.status, fit.status);
            // PartialEq treats NaN as unequal to itself; the bits were compared above.
            if !x.is_nan() {
                assert_eq!(back, fit);
            }
        }
    }
}
