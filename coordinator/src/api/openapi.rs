//! The OpenAPI 3 document of the service, written by hand next to the routes it describes
//! (a test checks that every route in [`super::router`] appears here).

use axum::Json;
use serde_json::{json, Value};

pub async fn document() -> Json<Value> {
    let mut doc = spec();
    if let (Some(paths), Value::Object(more)) = (
        doc["paths"].as_object_mut(),
        super::records::openapi_paths(),
    ) {
        paths.extend(more);
    }
    Json(doc)
}

fn err_responses(codes: &[&str]) -> Value {
    let mut m = serde_json::Map::new();
    for c in codes {
        m.insert(c.to_string(), json!({"description": describe(c), "content": {"application/json": {"schema": {"$ref": "#/components/schemas/ApiError"}}}}));
    }
    Value::Object(m)
}

fn describe(code: &str) -> &'static str {
    match code {
        "400" => "Malformed request; the body says what was wrong",
        "401" => "Missing or wrong credentials (admin token, or worker signature / clock)",
        "403" => "Not allowed (someone else's lease, quarantined worker or owner)",
        "404" => "No such campaign or lease",
        "409" => "Conflicts with the current state, or a replayed request (error replayed)",
        "413" => "Body larger than 262144 bytes",
        "422" => "Refused and counted against the worker: a false or misplaced solution, counts that differ from the unit's, zero work; or a plan with too many units",
        _ => "Error",
    }
}

fn ok(schema: Value) -> Value {
    json!({"description": "OK", "content": {"application/json": {"schema": schema}}})
}

fn with_errors(ok_resp: Value, errs: &[&str]) -> Value {
    let mut r = err_responses(errs);
    r.as_object_mut().unwrap().insert("200".into(), ok_resp);
    r
}

fn r(name: &str) -> Value {
    json!({"$ref": format!("#/components/schemas/{name}")})
}

fn body(name: &str) -> Value {
    json!({"required": true, "content": {"application/json": {"schema": r(name)}}})
}

fn signed_op(summary: &str, req: Option<&str>, resp: &str, errs: &[&str]) -> Value {
    let mut op = json!({
        "summary": summary,
        "security": [{"workerSignature": [], "workerId": [], "workerTime": [], "workerNonce": []}],
        "responses": with_errors(ok(r(resp)), errs),
    });
    if let Some(req) = req {
        op["requestBody"] = body(req);
    }
    op
}

fn lease_param() -> Value {
    json!([{"name": "id", "in": "path", "required": true, "schema": {"type": "integer"}, "description": "lease id"}])
}

fn name_param() -> Value {
    json!({"name": "name", "in": "path", "required": true, "schema": {"type": "string", "pattern": "^[A-Za-z0-9._-]{1,64}$"}})
}

pub fn spec() -> Value {
    let triple = json!({"type": "array", "items": {"type": "string", "pattern": "^-?[0-9]+$"}, "minItems": 3, "maxItems": 3,
        "description": "a solution: three decimal strings sorted ascending"});
    let count = json!({"oneOf": [{"type": "integer", "minimum": 0}, {"type": "string", "example": "1e12"}]});
    let rect = json!({"type": "object", "required": ["region", "d_lo", "d_hi", "z_lo", "z_hi"], "properties": {
        "region": {"type": "string", "enum": ["small", "equal", "main"]},
        "d_lo": {"type": "integer"}, "d_hi": {"type": "integer"}, "z_lo": {"type": "integer"}, "z_hi": {"type": "integer"}},
        "description": "d in [d_lo, d_hi), |z| in (z_lo, z_hi]"});
    let digest = json!({"type": "object", "required": ["d_values", "classes", "candidates", "survivors", "hash"], "properties": {
        "d_values": {"type": "integer"}, "classes": {"type": "integer"}, "candidates": {"type": "integer"},
        "survivors": {"type": "integer"}, "hash": {"type": "integer", "description": "u64"}}});
    let units = json!({"type": "object", "properties": {"total": {"type": "integer"}, "open": {"type": "integer"},
        "leased": {"type": "integer"}, "settled": {"type": "integer"}, "disputed": {"type": "integer"}}});
    let progress_props = json!({
        "units": r("UnitCounts"),
        "cost_total_s": {"type": "number", "description": "estimated reference-core seconds of all units"},
        "cost_settled_s": {"type": "number"},
        "fraction": {"type": "number", "description": "settled share of the work by cost, 0..1"},
        "rate": {"type": "number", "description": "settled reference-core seconds per second over the last 15 minutes"},
        "eta_s": {"type": ["number", "null"], "description": "seconds to completion at that rate"}});
    let mut target_props = progress_props.clone();
    let tp = target_props.as_object_mut().unwrap();
    tp.insert("k".into(), json!({"type": "integer"}));
    tp.insert("bound".into(), json!({"type": "integer"}));
    tp.insert("z0".into(), json!({"type": "integer"}));
    tp.insert(
        "solutions".into(),
        json!({"type": "array", "items": triple}),
    );
    tp.insert(
        "families".into(),
        json!({"type": "array", "items": r("FamilyMark"), "description": "the solutions above that belong to a parametric family"}),
    );
    tp.insert(
        "model".into(),
        json!({"oneOf": [r("TargetModel"), {"type": "null"}], "description": "found versus expected at the target's bound (the campaign's model says how they are counted)"}),
    );
    let mut campaign_props = progress_props.clone();
    let cp = campaign_props.as_object_mut().unwrap();
    cp.insert("name".into(), json!({"type": "string"}));
    cp.insert(
        "state".into(),
        json!({"type": "string", "enum": ["complete", "active", "paused", "cancelled"],
        "description": "complete once every unit of every target is settled"}),
    );
    cp.insert("kernel".into(), json!({"type": "string"}));
    cp.insert("bound".into(), json!({"type": "integer"}));
    cp.insert("unit_seconds".into(), json!({"type": "number"}));
    cp.insert("created_at".into(), json!({"type": "integer"}));
    cp.insert(
        "targets".into(),
        json!({"type": "array", "items": r("Target")}),
    );
    cp.insert(
        "solutions".into(),
        json!({"type": "array", "items": triple, "description": "all targets, by k then triple"}),
    );
    cp.insert("model".into(), r("ModelInfo"));
    cp.insert(
        "skipped".into(),
        json!({"type": "array", "items": {"type": "object", "properties": {"k": {"type": "integer"}, "reason": {"type": "string"}}},
        "description": "only in the answer to a creation: values of k a range named that cannot be targets (±4 mod 9, cubes, 0), with the reason; absent when none"}),
    );

    let admin_sec = json!([{"adminToken": []}]);
    let admin_errs = ["400", "401", "404", "409", "413", "422"];
    json!({
      "openapi": "3.1.0",
      "info": {"title": "cubehunt coordinator", "version": env!("CARGO_PKG_VERSION"),
        "description": "Campaigns searching x³+y³+z³=k, the worker protocol and read-only monitoring. Worker requests carry x-cubehunt-worker (id; 0 for enrolment), x-cubehunt-time (unix seconds, within 300 s), x-cubehunt-nonce (32 lowercase hex, never used twice: a repeated request is refused with 409 replayed) and x-cubehunt-signature (Ed25519, hex, over request_bytes(stamp, method, path, body) of cubehunt-common, format cubehunt-request/2, which names the coordinator's public key from GET /api/v1/about, so a request signed for one coordinator is refused by any other). Errors are ApiError bodies."},
      "paths": {
        "/healthz": {"get": {"summary": "Liveness and schema version", "responses": {"200": ok(json!({"type": "object"}))}}},
        "/metrics": {"get": {"summary": "Prometheus text format counters", "responses": {"200": {"description": "OK", "content": {"text/plain": {"schema": {"type": "string"}}}}}}},
        "/": {"get": {"summary": "Status page (HTML)", "responses": {"200": {"description": "OK", "content": {"text/html": {"schema": {"type": "string"}}}}}}},
        "/api/v1/openapi.json": {"get": {"summary": "This document", "responses": {"200": ok(json!({"type": "object"}))}}},
        "/api/v1/campaigns": {"get": {"summary": "Every campaign with progress", "responses": {"200": ok(json!({"type": "array", "items": r("Campaign")}))}}},
        "/api/v1/campaigns/{name}": {"get": {"summary": "One campaign with per-target progress and solutions", "parameters": [name_param()],
            "responses": with_errors(ok(r("Campaign")), &["404"])}},
        "/api/v1/campaigns/{name}/solutions": {"get": {"summary": "Settled solutions with the unit that found them", "parameters": [name_param()],
            "responses": with_errors(ok(json!({"type": "array", "items": r("SolutionRecord")})), &["404"])}},
        "/api/v1/workers": {"get": {"summary": "Enrolled workers by id, one page: those with ids above `after`, at most `limit` (default 500, at most 1000); a shorter page is the last",
            "parameters": [
                {"name": "after", "in": "query", "required": false, "schema": {"type": "integer", "minimum": 0}},
                {"name": "limit", "in": "query", "required": false, "schema": {"type": "integer", "minimum": 1, "maximum": 1000}}],
            "responses": with_errors(ok(json!({"type": "array", "items": r("Worker")})), &["400"])}},
        "/api/v1/about": {"get": {"summary": "The coordinator's public key, kernel version and enrolment mode (fetch and pin the key before enrolling)",
            "responses": {"200": ok(r("About"))}}},
        "/api/v1/admin/invites": {
            "get": {"summary": "Invitations (admin; tokens are never shown again)", "security": admin_sec, "responses": with_errors(ok(json!({"type": "array", "items": {"type": "object"}})), &["401"])},
            "post": {"summary": "Make an invitation for one owner (admin); the token is shown once", "security": admin_sec,
                "requestBody": {"required": true, "content": {"application/json": {"schema": {"type": "object", "required": ["owner"], "properties": {
                    "owner": {"type": "string"}, "workers": {"type": "integer"}, "expires_in_s": {"type": "integer"}, "note": {"type": "string"}}}}}},
                "responses": with_errors(ok(json!({"type": "object"})), &["400", "401", "413"])}},
        "/api/v1/admin/incidents": {"get": {"summary": "Proven mismatches and quarantines, oldest first, 500 per page (admin)", "security": admin_sec,
            "parameters": [{"name": "after", "in": "query", "required": false, "schema": {"type": "integer"}, "description": "the next_after of the previous page"}],
            "responses": with_errors(ok(json!({"type": "object", "properties": {"incidents": {"type": "array", "items": r("Incident")}, "next_after": {"type": "integer"}}})), &["400", "401"])}},
        "/api/v1/admin/workers/{id}/{action}": {"post": {"summary": "trust, distrust or quarantine a worker by hand (admin; quarantine voids its reports and reopens what they settled)",
            "security": admin_sec,
            "parameters": [{"name": "id", "in": "path", "required": true, "schema": {"type": "integer"}},
                {"name": "action", "in": "path", "required": true, "schema": {"type": "string", "enum": ["trust", "distrust", "quarantine"]}}],
            "requestBody": {"required": false, "content": {"application/json": {"schema": {"type": "object", "properties": {"reason": {"type": "string"}}}}}},
            "responses": with_errors(ok(r("Worker")), &["400", "401", "404", "413"])}},
        "/api/v1/enrol": {"post": {"summary": "Enrol a worker key under an owner (signed with that key, worker id 0)",
            "security": [{"workerSignature": [], "workerId": [], "workerTime": [], "workerNonce": []}], "requestBody": body("EnrolRequest"),
            "responses": with_errors(ok(r("EnrolResponse")), &["400", "401", "409", "413"])}},
        "/api/v1/lease": {"post": signed_op("Ask for a unit to compute", Some("LeaseRequest"), "LeaseResponse", &["400", "401", "403", "413"])},
        "/api/v1/lease/{id}/heartbeat": {"post": {
            "parameters": lease_param(),
            "summary": "Extend a held lease; keep_going=false means stop", "security": [{"workerSignature": [], "workerId": [], "workerTime": [], "workerNonce": []}],
            "requestBody": body("HeartbeatRequest"), "responses": with_errors(ok(r("HeartbeatResponse")), &["400", "401", "403", "404", "413"])}},
        "/api/v1/lease/{id}/report": {"post": {
            "parameters": lease_param(),
            "summary": "Report a held lease's result; accepted=false for a repeat of a stored report",
            "security": [{"workerSignature": [], "workerId": [], "workerTime": [], "workerNonce": []}],
            "requestBody": body("SignedReport"), "responses": with_errors(ok(r("ReportResponse")), &["400", "401", "403", "404", "409", "413", "422"])}},
        "/api/v1/lease/{id}/release": {"post": {
            "parameters": lease_param(),
            "summary": "Give a lease back", "security": [{"workerSignature": [], "workerId": [], "workerTime": [], "workerNonce": []}],
            "responses": with_errors(ok(r("ReleaseResponse")), &["400", "401", "403", "404"])}},
        "/api/v1/admin/campaigns": {
            "get": {"summary": "Every campaign (admin)", "security": admin_sec, "responses": with_errors(ok(json!({"type": "array", "items": r("Campaign")})), &["401"])},
            "post": {"summary": "Create a campaign: plans and signs every unit", "security": admin_sec, "requestBody": body("CreateCampaign"),
                "responses": with_errors(ok(r("Campaign")), &admin_errs)}},
        "/api/v1/admin/campaigns/{name}": {"get": {"summary": "One campaign (admin)", "security": admin_sec, "parameters": [name_param()],
            "responses": with_errors(ok(r("Campaign")), &["401", "404"])}},
        "/api/v1/admin/campaigns/{name}/{action}": {"post": {"summary": "pause, resume, cancel, or extend (body ExtendCampaign: plans only the new part)",
            "security": admin_sec,
            "parameters": [name_param(), {"name": "action", "in": "path", "required": true, "schema": {"type": "string", "enum": ["pause", "resume", "cancel", "extend"]}}],
            "requestBody": {"required": false, "content": {"application/json": {"schema": r("ExtendCampaign")}}},
            "responses": with_errors(ok(r("Campaign")), &admin_errs)}}
      },
      "components": {
        "securitySchemes": {
          "adminToken": {"type": "http", "scheme": "bearer", "description": "the token printed by init, kept in <data-dir>/admin.token"},
          "workerId": {"type": "apiKey", "in": "header", "name": "x-cubehunt-worker"},
          "workerTime": {"type": "apiKey", "in": "header", "name": "x-cubehunt-time"},
          "workerSignature": {"type": "apiKey", "in": "header", "name": "x-cubehunt-signature"},
          "workerNonce": {"type": "apiKey", "in": "header", "name": "x-cubehunt-nonce"}
        },
        "schemas": {
          "ApiError": {"type": "object", "required": ["error", "message"], "properties": {"error": {"type": "string"}, "message": {"type": "string"}}},
          "Rect": rect,
          "Digest": digest,
          "Solution": triple,
          "UnitCounts": units,
          "Target": {"type": "object", "properties": target_props},
          "Campaign": {"type": "object", "properties": campaign_props},
          "SolutionRecord": {"type": "object", "properties": {"k": {"type": "integer"}, "solution": triple, "unit_id": {"type": "integer"}, "found_at": {"type": "integer"},
              "family": {"type": ["string", "null"], "description": "the parametric family it belongs to, e.g. \"Verebrusov 1908, t = 1\" (k = ±2m³) or \"Mahler 1936, t = -1\" (k = ±m³); null when none"}}},
          "FamilyMark": {"type": "object", "properties": {"solution": triple,
              "family": {"type": "string", "enum": ["mahler", "verebrusov"], "description": "Mahler 1936: (9t⁴, 3t − 9t⁴, 1 − 9t³) for k = 1; Verebrusov 1908: (1 + 6t³, 1 − 6t³, −6t²) for k = 2; both scaled by m for k = ±m³·k₀ and negated for negative k"},
              "t": {"type": "string", "description": "the family's parameter, decimal"},
              "description": {"type": "string"}}},
          "TargetModel": {"type": "object", "description": "the Heath-Brown density model at the target's bound (docs/heuristic.md), computed once per k and bound", "properties": {
              "singular_series": {"type": "number", "description": "S(k), the Euler product up to the campaign's model.prime_bound"},
              "expected_total": {"type": "number", "description": "expected solutions with min(|x|,|y|,|z|) <= bound, up to permutation"},
              "found": {"type": "integer", "description": "stored solutions counted the same way, leaving out parametric and trivial families"},
              "not_counted": {"type": "integer", "description": "stored solutions left out of found"},
              "low": {"type": "integer"}, "high": {"type": "integer", "description": "the central 95 % Poisson interval of expected_total (ModelInfo.interval), exact from the Poisson probabilities"},
              "verdict": {"type": "string", "enum": ["fewer", "as_expected", "more"], "description": "found below low, within [low, high], or above high"},
              "note": {"type": "string", "description": "what the model does not count for this k (absent when nothing)"}}},
          "ModelInfo": {"type": "object", "properties": {"counting": {"type": "string"}, "interval": {"type": "string"}, "level": {"type": "number"}, "prime_bound": {"type": "integer"}}},
          "Worker": {"type": "object", "properties": {"id": {"type": "integer"}, "owner": {"type": "string"}, "label": {"type": "string"},
              "kernel": {"type": "string"}, "threads": {"type": "integer"}, "enrolled_at": {"type": "integer"}, "last_seen": {"type": "integer"},
              "reports": {"type": "integer"}, "units_settled": {"type": "integer"}, "errors": {"type": "integer"}, "quarantined": {"type": "boolean"},
              "active_leases": {"type": "integer"}, "rate": {"type": ["number", "null"], "description": "reference-core seconds per second"}}},
          "CreateCampaign": {"type": "object", "required": ["name", "ks", "bound"], "properties": {
              "name": {"type": "string", "pattern": "^[A-Za-z0-9._-]{1,64}$"},
              "ks": {"oneOf": [{"type": "array", "items": {"type": "integer"}}, {"type": "string", "example": "3,33,100..200"}],
                  "description": "a list of integers, or a string: K, K,K,…, a range A..B (both ends included, negative values allowed) or a mix, as `plan --k` takes. Values of a range that cannot be targets (±4 mod 9, cubes, 0) are skipped and listed in the answer's skipped; a value named on its own that cannot be a target is refused"},
              "bound": count.clone(),
              "unit_seconds": {"type": "number", "default": 600},
              "strict": {"type": "boolean", "default": false, "description": "refuse the whole request (400 bad_target, naming the values) instead of skipping values of a range that cannot be targets"}}},
          "ExtendCampaign": {"type": "object", "required": ["bound"], "properties": {"bound": count}},
          "EnrolRequest": {"type": "object", "required": ["owner", "public_key", "kernel", "threads"], "properties": {
              "owner": {"type": "string", "pattern": "^[A-Za-z0-9._-]{1,64}$"}, "public_key": {"type": "string", "description": "64 hex"},
              "kernel": {"type": "string"}, "threads": {"type": "integer"}, "label": {"type": "string", "maxLength": 64}, "invite": {"type": "string", "description": "the invitation token, when enrolment is by invitation"}}},
          "EnrolResponse": {"type": "object", "properties": {"worker_id": {"type": "integer"}, "coordinator_key": {"type": "string"}}},
          "LeaseRequest": {"type": "object", "properties": {"threads": {"type": "integer"}}},
          "UnitSpec": {"type": "object", "properties": {"unit_id": {"type": "integer"}, "campaign": {"type": "string"}, "k": {"type": "integer"},
              "bound": {"type": "integer"}, "kernel": {"type": "string"}, "rect": r("Rect"),
              "cost": {"type": "integer", "description": "estimated reference-core microseconds"}}},
          "SignedUnit": {"type": "object", "properties": {"unit": r("UnitSpec"), "signature": {"type": "string", "description": "coordinator Ed25519 over UnitSpec::canonical_bytes"}}},
          "LeaseGrant": {"type": "object", "properties": {"lease_id": {"type": "integer"}, "deadline": {"type": "integer"}, "heartbeat_s": {"type": "integer"}, "unit": r("SignedUnit")}},
          "LeaseResponse": {"type": "object", "properties": {"lease": {"oneOf": [r("LeaseGrant"), {"type": "null"}]}, "retry_after_s": {"type": "integer"}}},
          "HeartbeatRequest": {"type": "object", "properties": {"progress": {"type": "number"}}},
          "HeartbeatResponse": {"type": "object", "properties": {"deadline": {"type": "integer"}, "keep_going": {"type": "boolean"}}},
          "Report": {"type": "object", "additionalProperties": false, "required": ["lease_id", "unit_id", "worker_id", "kernel", "k", "rect", "digest", "pieces", "solutions"], "properties": {
              "lease_id": {"type": "integer"}, "unit_id": {"type": "integer"}, "worker_id": {"type": "integer"}, "kernel": {"type": "string"},
              "k": {"type": "integer"}, "rect": r("Rect"),
              "digest": {"type": "string", "description": "digest text h<hash hex>-d<d values>-r<classes>-c<candidates>-s<survivors>; the sum of the pieces"},
              "pieces": {"type": "array", "items": {"type": "string"}, "maxItems": 1024, "description": "the digest of every piece of the unit's fixed split (common::pieces), in order; the signature covers their Merkle root"},
              "solutions": {"type": "array", "items": triple, "maxItems": 1000},
              "elapsed_s": {"type": "number"}}},
          "SignedReport": {"type": "object", "properties": {"report": r("Report"), "signature": {"type": "string", "description": "worker Ed25519 over Report::canonical_bytes"}}},
          "ReportResponse": {"type": "object", "properties": {"accepted": {"type": "boolean"}, "unit_state": {"type": "string", "enum": ["open", "disputed", "review", "settled"]}}},
          "About": {"type": "object", "properties": {"coordinator_key": {"type": "string", "description": "64 hex"}, "kernel": {"type": "string"},
              "enrolment": {"type": "string", "enum": ["open", "invite"]}}},
          "Incident": {"type": "object", "properties": {"id": {"type": "integer"}, "at": {"type": "integer"},
              "kind": {"type": "string", "enum": ["piece_mismatch", "unit_mismatch", "too_many_errors", "admin"]},
              "worker_id": {"type": "integer"}, "report_id": {"type": ["integer", "null"]}, "unit_id": {"type": ["integer", "null"]},
              "spot_check_id": {"type": ["integer", "null"]}, "detail": {"type": "string"},
              "quarantined": {"type": "array", "items": {"type": "integer"}}, "voided": {"type": "array", "items": {"type": "integer"}},
              "rechecked": {"type": "array", "items": {"type": "integer"}}}},
          "ReleaseResponse": {"type": "object", "properties": {"released": {"type": "boolean"}}}
        }
      }
    })
}
