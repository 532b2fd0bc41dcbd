//! A methods paragraph a researcher can adapt for a paper, with the references of every method
//! the run used. The references are the authors' publications as the project's documentation
//! cites them; check each against the original before submission.

use super::ReportInputs;
use super::html::{Section, escape};

/// (key, reference) of every method the paragraph may cite.
const REFERENCES: [(&str, &str); 14] = [
    (
        "navarro",
        "Navarro, D. J., & Fuss, I. G. (2009). Fast and accurate calculations for first-passage times in Wiener diffusion models. Journal of Mathematical Psychology, 53, 222–230.",
    ),
    (
        "blurton",
        "Blurton, S. P., Kesselmeier, M., & Gondan, M. (2012). Fast and accurate calculations for cumulative first-passage time distributions in Wiener diffusion models. Journal of Mathematical Psychology, 56, 470–475.",
    ),
    (
        "liu",
        "Liu, D. C., & Nocedal, J. (1989). On the limited memory BFGS method for large scale optimization. Mathematical Programming, 45, 503–528.",
    ),
    (
        "schwarz",
        "Schwarz, G. (1978). Estimating the dimension of a model. The Annals of Statistics, 6, 461–464.",
    ),
    (
        "stephan",
        "Stephan, K. E., Penny, W. D., Daunizeau, J., Moran, R. J., & Friston, K. J. (2009). Bayesian model selection for group studies. NeuroImage, 46, 1004–1017.",
    ),
    (
        "rigoux",
        "Rigoux, L., Stephan, K. E., Friston, K. J., & Daunizeau, J. (2014). Bayesian model selection for group studies — revisited. NeuroImage, 84, 971–985.",
    ),
    (
        "huys",
        "Huys, Q. J. M., Cools, R., Gölzer, M., Friedel, E., Heinz, A., Dolan, R. J., & Dayan, P. (2011). Disentangling the roles of approach, activation and valence in instrumental and Pavlovian responding. PLoS Computational Biology, 7, e1002028.",
    ),
    (
        "welch",
        "Welch, B. L. (1947). The generalization of 'Student's' problem when several different population variances are involved. Biometrika, 34, 28–35.",
    ),
    (
        "hedges",
        "Hedges, L. V. (1981). Distribution theory for Glass's estimator of effect size and related estimators. Journal of Educational Statistics, 6, 107–128.",
    ),
    (
        "benjamini",
        "Benjamini, Y., & Hochberg, Y. (1995). Controlling the false discovery rate: a practical and powerful approach to multiple testing. Journal of the Royal Statistical Society B, 57, 289–300.",
    ),
    (
        "ratcliff",
        "Ratcliff, R., & Tuerlinckx, F. (2002). Estimating parameters of the diffusion model: approaches to dealing with contaminant reaction times and parameter variability. Psychonomic Bulletin & Review, 9, 438–481.",
    ),
    (
        "wilson",
        "Wilson, E. B. (1927). Probable inference, the law of succession, and statistical inference. Journal of the American Statistical Association, 22, 209–212.",
    ),
    (
        "lenth",
        "Lenth, R. V. (1989). Algorithm AS 243: cumulative distribution function of the non-central t distribution. Applied Statistics, 38, 185–189.",
    ),
    (
        "okabe",
        "Okabe, M., & Ito, K. (2008). Color universal design (CUD): how to make figures and presentations that are friendly to colorblind people. J*FLY.",
    ),
];

/// The methods section: a paragraph built from what the run did, the model components with
/// their equations and sources, and the references.
pub fn section(record: Option<&serde_json::Value>, inputs: &ReportInputs) -> Section {
    let mut cited: Vec<&str> = Vec::new();
    let starts = record
        .and_then(|r| r.get("starts"))
        .and_then(serde_json::Value::as_u64)
        .map_or("several".to_string(), |n| n.to_string());
    let seed = record
        .and_then(|r| r.get("seed"))
        .and_then(serde_json::Value::as_u64)
        .map_or(String::new(), |n| format!(" (seed {n})"));
    let models: Vec<(String, String)> = record
        .and_then(|r| r.get("models"))
        .and_then(serde_json::Value::as_array)
        .map(|a| {
            a.iter()
                .filter_map(|m| {
                    Some((
                        m.get("name")?.as_str()?.to_string(),
                        m.get("definition")?.as_str()?.to_string(),
                    ))
                })
                .collect()
        })
        .unwrap_or_default();
    let names: Vec<String> = models.iter().map(|(n, _)| n.clone()).collect();
    let mut text = if names.is_empty() {
        String::from("No fit folder was reported.")
    } else {
        cited.extend(["navarro", "blurton", "liu", "schwarz"]);
        format!(
            "Choices and response times were modelled with valuedrift {} ({} model{}: {}). For each \
         participant, parameters were estimated by maximum likelihood (maximum a posteriori \
         where a model declares priors) with L-BFGS (Liu &amp; Nocedal 1989) and exact \
         gradients, from {starts} quasi-random starts{seed}; the Wiener first-passage density \
         and distribution function were computed with the series of Navarro &amp; Fuss (2009) \
         and Blurton, Kesselmeier &amp; Gondan (2012). Standard errors come from the observed \
         information. Models were compared by the Bayesian information criterion (Schwarz \
         1978)",
            env!("CARGO_PKG_VERSION"),
            names.len(),
            if names.len() == 1 { "" } else { "s" },
            escape(&names.join(", "))
        )
    };
    let has = |name: &str| inputs.fits.as_ref().is_some_and(|f| f.join(name).exists());
    if has("model_selection.csv") {
        text.push_str(
            " and random-effects Bayesian model selection (Stephan et al. 2009) with \
             protected exceedance probabilities (Rigoux et al. 2014)",
        );
        cited.extend(["stephan", "rigoux"]);
    }
    text.push('.');
    if has("eb_parameters.csv") {
        text.push_str(
            " Group priors were fitted by expectation–maximisation with the Laplace \
             approximation (Huys et al. 2011), giving empirical-Bayes estimates.",
        );
        cited.push("huys");
    }
    if has("contrast.csv") {
        text.push_str(
            " Groups were compared with Welch's t test (Welch 1947), Hedges' g (Hedges 1981) \
             and Benjamini–Hochberg q values (Benjamini &amp; Hochberg 1995).",
        );
        cited.extend(["welch", "hedges", "benjamini"]);
    }
    if inputs.check.is_some() {
        text.push_str(
            " Model fit was checked against data simulated at each participant's estimates \
             (choice proportions and response-time quantiles; Ratcliff &amp; Tuerlinckx 2002).",
        );
        cited.push("ratcliff");
    }
    if inputs.plan.is_some() {
        text.push_str(
            " Before data collection, parameter and model recovery and the power of the group \
             contrast were estimated by simulating studies from the design and fitting them in \
             the same way; power intervals are Wilson score intervals (Wilson 1927) and the \
             normal-theory power uses the noncentral t distribution (Lenth 1989).",
        );
        cited.extend(["welch", "wilson", "lenth"]);
    }
    text.push_str(" Figures use the palette of Okabe &amp; Ito (2008).");
    cited.push("okabe");
    let mut components = String::new();
    for (name, definition) in &models {
        if let Ok(model) = crate::model::parse_model(definition, name) {
            components.push_str(&format!("<li><strong>{}</strong><ul>", escape(name)));
            for equation in model.equations.iter().filter(|e| !e.is_empty()) {
                components.push_str(&format!("<li>{}</li>", escape(equation)));
            }
            for c in &model.costs {
                components.push_str(&format!("<li>{}</li>", escape(c.equation)));
            }
            components.push_str("</ul></li>");
        }
    }
    let mut references = String::new();
    for (key, reference) in REFERENCES {
        if cited.contains(&key) {
            references.push_str(&format!("<li>{}</li>", escape(reference)));
        }
    }
    Section {
        id: "methods",
        title: "Methods".into(),
        body: format!(
            "<div class=\"methods\"><p>{text}</p></div>\
             <details><summary>Model components with their equations and sources</summary>\
             <ul>{components}</ul></details>\
             <p>References (check each against the original before submission):</p>\
             <ul>{references}</ul>"
        ),
    }
}
