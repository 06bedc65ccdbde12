//! The PDA and IMM-PDA updates of src/engine/pda.rs against the numpy
//! fixtures of tests/fixtures/make_pda_fixtures.py (the PDAF equations of
//! Bar-Shalom & Fortmann 1988 ch. 6 / Bar-Shalom, Daum & Huang 2009,
//! written independently in numpy 2.4.6 with scipy 1.17.1's normal pdf).

mod common;

use common::{assert_cov_close, assert_rel, assert_state_close, fixture, gaussian, m2, num, v2};
use serde_json::Value;
use skerry::engine::imm::{Imm, ImmState, MAX_MODELS};
use skerry::engine::pda::{PdaParams, PdaPlot, imm_pda_update, pda_update};

fn params(f: &Value) -> PdaParams {
    let p = &f["params"];
    PdaParams {
        pd: num(&p["pd"]),
        pg: num(&p["pg"]),
        lambda: num(&p["lambda"]),
    }
}

fn plots(v: &Value) -> Vec<PdaPlot> {
    v.as_array()
        .expect("plots")
        .iter()
        .map(|p| PdaPlot {
            z: v2(&p["z"]),
            r: m2(&p["r"]),
            beta: num(&p["beta"]),
            lead_s: num(&p["lead_s"]),
        })
        .collect()
}

#[test]
fn pda_update_matches_numpy() {
    let f = fixture("pda_cases.json");
    let params = params(&f);
    for (i, c) in f["single"].as_array().expect("single").iter().enumerate() {
        let g = gaussian(&c["x"], &c["p"]);
        let want = gaussian(&c["x_post"], &c["p_post"]);
        let (got, ln_l) =
            pda_update(&g, &plots(&c["plots"]), num(&c["beta0"]), &params).expect("update");
        assert_state_close(&got.x, &want.x, &want.p, 1e-9, &format!("case {i} x"));
        assert_cov_close(&got.p, &want.p, 1e-9, &format!("case {i} P"));
        assert_rel(ln_l, num(&c["ln_lambda"]), 1e-9, &format!("case {i} ln Λ"));
    }
}

#[test]
fn imm_pda_update_matches_numpy() {
    let f = fixture("pda_cases.json");
    let params = params(&f);
    // Only the model count matters to the update (the predictions are given).
    let imm = Imm::vessel_default();
    for (i, c) in f["imm"].as_array().expect("imm").iter().enumerate() {
        let comps = c["comps"].as_array().expect("comps");
        let mut pred = ImmState {
            comps: [gaussian(&comps[0]["x"], &comps[0]["p"]); MAX_MODELS],
            mu: [0.0; MAX_MODELS],
        };
        for m in 0..3 {
            pred.comps[m] = gaussian(&comps[m]["x"], &comps[m]["p"]);
            pred.mu[m] = num(&c["mu_pred"][m]);
        }
        let got = imm_pda_update(&imm, &pred, &plots(&c["plots"]), num(&c["beta0"]), &params)
            .expect("update");
        for m in 0..3 {
            let w = &c["comps_post"][m];
            let want = gaussian(&w["x"], &w["p"]);
            assert_state_close(
                &got.comps[m].x,
                &want.x,
                &want.p,
                1e-9,
                &format!("case {i} model {m} x"),
            );
            assert_cov_close(
                &got.comps[m].p,
                &want.p,
                1e-9,
                &format!("case {i} model {m} P"),
            );
            let mu = num(&c["mu_post"][m]);
            assert!(
                (got.mu[m] - mu).abs() < 1e-9,
                "case {i} μ{m}: {} vs {mu}",
                got.mu[m]
            );
        }
    }
}
