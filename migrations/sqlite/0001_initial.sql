-- cubehunt coordinator store, schema version 1 (SQLite).
--
-- Conventions
-- * Times are unix seconds (INTEGER, UTC).
-- * u64 quantities that can exceed 2^63 (digest hash) are kept in text; bounds and rectangle
--   edges are at most 2^63 - 1 (kernel::MAX_Z) and fit INTEGER.
-- * Solutions are JSON arrays of triples of decimal strings sorted ascending
--   (common::Solution); a list is sorted and without repeats.
-- * Digests are in their text form h<hash>-d<d_values>-r<classes>-c<candidates>-s<survivors>
--   (common::digest); equal text means equal digest.
-- * Owner names are stored in lower case: owners compare without regard to case.
-- * The words for states are those of coordinator/src/lifecycle.rs, which owns the rules.
-- * Nothing outside coordinator/src/store/ reads or writes these tables.
-- * The SQL in the store is written to run on SQLite and PostgreSQL alike ($N parameters,
--   no engine-specific functions); only the schema files differ per engine.

-- One search hosted by this coordinator.
CREATE TABLE campaigns (
    id           INTEGER PRIMARY KEY,
    name         TEXT    NOT NULL UNIQUE,      -- 1-64 chars of [A-Za-z0-9._-]
    kernel       TEXT    NOT NULL,             -- pinned kernel version (KERNEL_VERSION when created)
    bound        INTEGER NOT NULL,             -- current bound B of every target
    unit_seconds REAL    NOT NULL,             -- planning goal: reference-core seconds per unit
    state        TEXT    NOT NULL DEFAULT 'active'
                 CHECK (state IN ('active', 'paused', 'cancelled')),
    created_at   INTEGER NOT NULL,
    updated_at   INTEGER NOT NULL
);

-- Id blocks handed out before rows are written (units are signed with their id before they
-- are stored, so their ids are reserved first; several coordinators may share one store).
CREATE TABLE counters (
    name TEXT PRIMARY KEY,
    next INTEGER NOT NULL
);
INSERT INTO counters (name, next) VALUES ('units', 1);

-- One value of k inside a campaign.
CREATE TABLE targets (
    id          INTEGER PRIMARY KEY,
    campaign_id INTEGER NOT NULL REFERENCES campaigns(id),
    k           INTEGER NOT NULL,
    bound       INTEGER NOT NULL,              -- current bound (equals the campaign's)
    z0          INTEGER NOT NULL,              -- kernel::z0(k)
    UNIQUE (campaign_id, k)
);

-- Planning history of a target: one row per plan (creation, then each extension).
-- The units of the plan that raised the bound from bound_from to bound_to carry
-- units.bound = bound_to, so the units of a target with units.bound <= B tile its regions up
-- to B (an old certificate stays checkable after an extension).
CREATE TABLE target_plans (
    id          INTEGER PRIMARY KEY,
    target_id   INTEGER NOT NULL REFERENCES targets(id),
    bound_from  INTEGER NOT NULL,              -- 0 for the first plan
    bound_to    INTEGER NOT NULL,
    units       INTEGER NOT NULL,              -- units created by this plan
    cost_us     INTEGER NOT NULL,              -- their total estimated cost (reference-core µs)
    created_at  INTEGER NOT NULL
);

-- A machine that enrolled with its own Ed25519 key.
CREATE TABLE workers (
    id            INTEGER PRIMARY KEY,
    owner         TEXT    NOT NULL,            -- lower case, 1-64 chars of [a-z0-9._-]
    public_key    TEXT    NOT NULL UNIQUE,     -- 64 hex
    kernel        TEXT    NOT NULL,            -- kernel version stated at enrolment
    threads       INTEGER NOT NULL,            -- stated at enrolment (1-4096); sets its lease cap
    label         TEXT    NOT NULL DEFAULT '',
    address       TEXT    NOT NULL DEFAULT '', -- peer address of its latest request
    net_prefix    TEXT    NOT NULL DEFAULT '', -- /24 (IPv4) or /48 (IPv6) of that address
    invite_id     INTEGER REFERENCES invites(id), -- the invitation it enrolled with, if any
    enrolled_at   INTEGER NOT NULL,
    last_seen     INTEGER NOT NULL,
    asked_at      INTEGER NOT NULL DEFAULT 0,  -- latest request for a lease (only workers that ask recently are drawn for offers)
    draw_key      INTEGER NOT NULL,            -- random; the offer draw walks workers in this order
    active        INTEGER NOT NULL DEFAULT 0,  -- leases in state 'active'
    reports       INTEGER NOT NULL DEFAULT 0,  -- reports stored (any verdict)
    units_settled INTEGER NOT NULL DEFAULT 0,  -- reports in a settling outcome
    confirmed     INTEGER NOT NULL DEFAULT 0,  -- reports the organiser's own result confirmed
    errors        INTEGER NOT NULL DEFAULT 0,  -- its reports with verdict disagree or refused, or proven wrong
    trusted       INTEGER NOT NULL DEFAULT 0,  -- 1: the organiser vouches for it (its results count as the organiser's)
    quarantined   INTEGER NOT NULL DEFAULT 0,  -- 1: no more leases; its reports do not count
    quarantined_at INTEGER,
    quarantine_reason TEXT NOT NULL DEFAULT '',
    work_us       INTEGER NOT NULL DEFAULT 0,  -- sum of cost_us of its reported leases
    wall_s        INTEGER NOT NULL DEFAULT 0   -- sum of (reported_at - issued_at) over them
);
CREATE INDEX workers_owner ON workers (owner);
CREATE INDEX workers_draw ON workers (draw_key) WHERE quarantined = 0;

-- Invitations the organiser issued (enrolment by invitation): one owner, a number of workers.
CREATE TABLE invites (
    id           INTEGER PRIMARY KEY,
    token_sha256 TEXT    NOT NULL UNIQUE,      -- hex SHA-256 of the token (the token itself is shown once)
    owner        TEXT    NOT NULL,             -- lower case; workers enrolled with it belong to this owner
    workers_left INTEGER NOT NULL,             -- enrolments it still allows
    note         TEXT    NOT NULL DEFAULT '',
    created_at   INTEGER NOT NULL,
    expires_at   INTEGER                       -- NULL: never
);

-- One rectangle of one region of one target, signed by the coordinator.
-- The signed UnitSpec is rebuilt from: id, campaigns.name, targets.k, bound, campaigns.kernel,
-- region, d_lo, d_hi, z_lo, z_hi, cost_us; `signature` is Ed25519 (hex) over
-- UnitSpec::canonical_bytes with the key in <data-dir>/coordinator.key.
--
-- Tiling rule (planner): small and equal units cut (z_lo, z_hi] along z (d = [0,0));
-- main units are d-strips [d_lo, d_hi) whose z range starts at max(Z0, previous bound,
-- main_z_floor(d_lo)), possibly cut along z.
CREATE TABLE units (
    id          INTEGER PRIMARY KEY,
    target_id   INTEGER NOT NULL REFERENCES targets(id),
    campaign_id INTEGER NOT NULL REFERENCES campaigns(id),   -- = targets.campaign_id
    region      TEXT    NOT NULL CHECK (region IN ('small', 'equal', 'main')),
    d_lo        INTEGER NOT NULL,
    d_hi        INTEGER NOT NULL,
    z_lo        INTEGER NOT NULL,
    z_hi        INTEGER NOT NULL,
    bound       INTEGER NOT NULL,              -- target bound of the plan that made the unit
    cost_us     INTEGER NOT NULL,              -- kernel::estimate_seconds * 1e6, rounded up (UnitSpec.cost)
    signature   TEXT    NOT NULL,
    -- lifecycle::UnitState
    state       TEXT    NOT NULL DEFAULT 'open' CHECK (state IN ('open', 'disputed', 'review', 'settled')),
    reports     INTEGER NOT NULL DEFAULT 0,    -- reports that vote (verdict counted, agree or disagree)
    active      INTEGER NOT NULL DEFAULT 0,    -- leases in state 'active'
    need        INTEGER NOT NULL DEFAULT 2,    -- further leases wanted (0 when settled or in review)
    offered_to  INTEGER REFERENCES workers(id),-- the worker drawn for its next lease
    offered_at  INTEGER,
    recheck     INTEGER NOT NULL DEFAULT 0,    -- 1: the organiser's side computes the whole unit
    known_digest    TEXT,                      -- the organiser's own result, once computed
    known_solutions TEXT,
    known_by    TEXT,                          -- 'coordinator' or 'worker:<id>' (a trusted worker)
    known_at    INTEGER,
    settled_digest    TEXT,                    -- the settling outcome
    settled_solutions TEXT,
    settled_at  INTEGER
);
CREATE INDEX units_target ON units (target_id, state);
-- First leases: units nobody has touched yet, in planned order.
CREATE INDEX units_fresh ON units (campaign_id, id)
    WHERE state = 'open' AND reports = 0 AND active = 0 AND offered_to IS NULL;
CREATE INDEX units_offered ON units (offered_to) WHERE offered_to IS NOT NULL;
-- Units that want a lease (offers are drawn for them).
CREATE INDEX units_wanting ON units (id) WHERE need > active;
CREATE INDEX units_recheck ON units (id) WHERE recheck = 1 AND known_digest IS NULL;
CREATE INDEX units_known ON units (campaign_id, id)
    WHERE known_digest IS NOT NULL AND state <> 'settled';
CREATE INDEX units_settled_at ON units (campaign_id, settled_at) WHERE settled_at IS NOT NULL;

-- One hand-out of a unit to a worker.
-- state: 'active' (held), 'reported' (a report was stored), 'expired' (deadline passed),
-- 'released' (given back by the worker), 'refused' (its report was a false claim),
-- 'withdrawn' (the unit settled, the campaign stopped or the worker was quarantined).
CREATE TABLE leases (
    id          INTEGER PRIMARY KEY,
    unit_id     INTEGER NOT NULL REFERENCES units(id),
    worker_id   INTEGER NOT NULL REFERENCES workers(id),
    owner       TEXT    NOT NULL,              -- = workers.owner (denormalised for the picker)
    net_prefix  TEXT    NOT NULL DEFAULT '',   -- peer /24 (IPv4) or /48 (IPv6) at lease time
    state       TEXT    NOT NULL DEFAULT 'active'
                CHECK (state IN ('active', 'reported', 'expired', 'released', 'refused', 'withdrawn')),
    issued_at   INTEGER NOT NULL,
    deadline    INTEGER NOT NULL,
    limit_at    INTEGER NOT NULL,              -- latest deadline heartbeats may reach
    heartbeat_at INTEGER,
    progress    REAL    NOT NULL DEFAULT 0,
    closed_at   INTEGER
);
CREATE INDEX leases_unit ON leases (unit_id, state);
CREATE INDEX leases_worker ON leases (worker_id, state);
CREATE INDEX leases_deadline ON leases (deadline) WHERE state = 'active';

-- A signed report in canonical form: the fields common::report::signed_bytes covers
-- (the rectangle, k and kernel are the unit's; the piece digests by their Merkle root) and
-- the worker's signature over them. The list of piece digests is not kept; the spot-checked
-- ones are, with their audit paths (spot_checks).
-- verdict: lifecycle::Verdict.
CREATE TABLE reports (
    id          INTEGER PRIMARY KEY,
    lease_id    INTEGER NOT NULL UNIQUE REFERENCES leases(id),
    unit_id     INTEGER NOT NULL REFERENCES units(id),
    worker_id   INTEGER NOT NULL REFERENCES workers(id),
    owner       TEXT    NOT NULL,
    digest      TEXT    NOT NULL,
    pieces      INTEGER NOT NULL,              -- number of piece digests
    pieces_root TEXT    NOT NULL,              -- hex Merkle root over them
    solutions   TEXT    NOT NULL,              -- canonical JSON list of claimed solutions
    signature   TEXT    NOT NULL,              -- worker's Ed25519 over the canonical bytes
    elapsed_s   REAL    NOT NULL DEFAULT 0,    -- worker-stated (informational, not signed)
    verdict     TEXT    NOT NULL DEFAULT 'counted'
                CHECK (verdict IN ('counted', 'agree', 'disagree', 'refused', 'voided')),
    wrong       INTEGER NOT NULL DEFAULT 0,    -- 1: proven wrong (the organiser's own result contradicts it, or a false claim)
    confirmed   INTEGER NOT NULL DEFAULT 0,    -- 1: the organiser's own result confirmed it
    reason      TEXT    NOT NULL DEFAULT '',   -- why it was refused, voided or proven wrong
    received_at INTEGER NOT NULL
);
CREATE INDEX reports_unit ON reports (unit_id, verdict);
CREATE INDEX reports_worker ON reports (worker_id, verdict);

-- Pieces of a report that the coordinator recomputes (drawn after the report was stored).
CREATE TABLE spot_checks (
    id          INTEGER PRIMARY KEY,
    report_id   INTEGER NOT NULL REFERENCES reports(id),
    unit_id     INTEGER NOT NULL REFERENCES units(id),
    piece       INTEGER NOT NULL,              -- index in pieces::of_unit order
    claimed     TEXT    NOT NULL,              -- the report's digest of that piece
    proof       TEXT    NOT NULL,              -- Merkle audit path to reports.pieces_root (hex, comma-separated)
    state       TEXT    NOT NULL DEFAULT 'waiting' CHECK (state IN ('waiting', 'passed', 'failed')),
    computed    TEXT,                          -- the coordinator's digest of the piece
    computed_solutions TEXT,                   -- and its solutions
    created_at  INTEGER NOT NULL,
    done_at     INTEGER,
    UNIQUE (report_id, piece)
);
CREATE INDEX spot_checks_waiting ON spot_checks (id) WHERE state = 'waiting';
CREATE INDEX spot_checks_unit ON spot_checks (unit_id);

-- What the audit must be able to retrace: every proven wrong report or false claim and what
-- it set in motion.
-- kind: 'piece_mismatch' (a spot check failed), 'unit_mismatch' (the organiser's result
-- contradicts a report), 'too_many_errors' (outvoted or refused reports reached the limit),
-- 'admin' (quarantined by hand).
CREATE TABLE incidents (
    id          INTEGER PRIMARY KEY,
    at          INTEGER NOT NULL,
    kind        TEXT    NOT NULL CHECK (kind IN ('piece_mismatch', 'unit_mismatch', 'too_many_errors', 'admin')),
    worker_id   INTEGER NOT NULL REFERENCES workers(id),
    report_id   INTEGER REFERENCES reports(id),
    unit_id     INTEGER REFERENCES units(id),
    spot_check_id INTEGER REFERENCES spot_checks(id),
    detail      TEXT    NOT NULL,
    quarantined TEXT    NOT NULL DEFAULT '[]', -- JSON list of worker ids quarantined by it
    voided      TEXT    NOT NULL DEFAULT '[]', -- JSON list of report ids that stopped counting
    rechecked   TEXT    NOT NULL DEFAULT '[]'  -- JSON list of unit ids sent to the organiser's side
);
CREATE INDEX incidents_worker ON incidents (worker_id);

-- Request nonces seen, kept until after the clock-skew window (replayed requests are refused).
CREATE TABLE nonces (
    worker_id   INTEGER NOT NULL,              -- 0 for enrolments
    nonce       TEXT    NOT NULL,
    expires_at  INTEGER NOT NULL,
    PRIMARY KEY (worker_id, nonce)
);
CREATE INDEX nonces_expiry ON nonces (expires_at);

-- Solutions of settled units, per target, deduplicated. a <= b <= c (decimal text).
CREATE TABLE solutions (
    id          INTEGER PRIMARY KEY,
    target_id   INTEGER NOT NULL REFERENCES targets(id),
    a           TEXT    NOT NULL,
    b           TEXT    NOT NULL,
    c           TEXT    NOT NULL,
    unit_id     INTEGER NOT NULL REFERENCES units(id),  -- the unit whose settlement stored it
    found_at    INTEGER NOT NULL,
    UNIQUE (target_id, a, b, c)
);

-- Certificates, issued once per target and bound and served from here afterwards. A
-- certificate whose units were later reopened (a settler proven wrong) is revoked.
CREATE TABLE certificates (
    id          INTEGER PRIMARY KEY,
    target_id   INTEGER NOT NULL REFERENCES targets(id),
    bound       INTEGER NOT NULL,
    issued_at   INTEGER NOT NULL,
    root        TEXT    NOT NULL,
    document    TEXT    NOT NULL,              -- the signed JSON document
    revoked_at  INTEGER,
    revoked_reason TEXT NOT NULL DEFAULT ''
);
CREATE UNIQUE INDEX certificates_current ON certificates (target_id, bound) WHERE revoked_at IS NULL;
