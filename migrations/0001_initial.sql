-- cubehunt coordinator store, schema version 1.
--
-- Conventions
-- * Times are unix seconds (INTEGER, UTC).
-- * u64 quantities that can exceed 2^63 (digest hash) are kept in text; bounds and rectangle
--   edges are at most 2^63 - 1 (kernel::MAX_Z) and fit INTEGER.
-- * Solutions are JSON arrays of three decimal strings sorted ascending (common::Solution).
-- * Digests are in their text form h<hash>-d<d_values>-r<classes>-c<candidates>-s<survivors>
--   (common::digest); equal text means equal digest.
-- * Nothing outside coordinator/src/store/ reads or writes these tables.

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

-- One rectangle of one region of one target, signed by the coordinator.
-- The signed UnitSpec is rebuilt from: id, campaigns.name, targets.k, bound, campaigns.kernel,
-- region, d_lo, d_hi, z_lo, z_hi, cost_us; `signature` is Ed25519 (hex) over
-- UnitSpec::canonical_bytes with the key in <data-dir>/coordinator.key.
--
-- Tiling rule (planner): small and equal units cut (z_lo, z_hi] along z (d = [0,0));
-- main units are d-strips [d_lo, d_hi) whose z range starts at max(Z0, previous bound,
-- main_z_floor(d_lo)), possibly cut along z; the part of a strip below main_z_floor(d)
-- for its larger d lies outside the region and is skipped by the kernel.
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
    -- Cross-check state: 'open' (fewer than two agreeing reports), 'disputed' (reports
    -- differ, no majority yet), 'settled' (a majority of at least two distinct owners agrees).
    state       TEXT    NOT NULL DEFAULT 'open' CHECK (state IN ('open', 'disputed', 'settled')),
    reports     INTEGER NOT NULL DEFAULT 0,    -- stored, counted reports (verdict <> 'rejected')
    active      INTEGER NOT NULL DEFAULT 0,    -- leases in state 'active'
    need        INTEGER NOT NULL DEFAULT 2,    -- further concurrent leases wanted (0 when settled)
    settled_digest    TEXT,                    -- digest text of the settling majority
    settled_solutions TEXT,                    -- its solutions (JSON), when settled
    settled_at  INTEGER
);
CREATE INDEX units_target ON units (target_id, state);
-- The lease picker walks this index: units that want a lease, those with a report first.
CREATE INDEX units_leasable ON units (campaign_id, reports DESC, id) WHERE need > active;
CREATE INDEX units_settled_at ON units (campaign_id, settled_at) WHERE settled_at IS NOT NULL;

-- A machine that enrolled with its own Ed25519 key.
CREATE TABLE workers (
    id            INTEGER PRIMARY KEY,
    owner         TEXT    NOT NULL,            -- 1-64 chars of [A-Za-z0-9._-]
    public_key    TEXT    NOT NULL UNIQUE,     -- 64 hex
    kernel        TEXT    NOT NULL,            -- kernel version stated at enrolment
    threads       INTEGER NOT NULL,
    label         TEXT    NOT NULL DEFAULT '',
    address       TEXT    NOT NULL DEFAULT '', -- peer address at enrolment
    enrolled_at   INTEGER NOT NULL,
    last_seen     INTEGER NOT NULL,
    reports       INTEGER NOT NULL DEFAULT 0,  -- reports stored (any verdict)
    units_settled INTEGER NOT NULL DEFAULT 0,  -- reports that ended in a settling majority
    errors        INTEGER NOT NULL DEFAULT 0,  -- minority reports + refused false claims
    quarantined   INTEGER NOT NULL DEFAULT 0,  -- 1: no more leases
    work_us       INTEGER NOT NULL DEFAULT 0,  -- sum of cost_us of its reported leases
    wall_s        INTEGER NOT NULL DEFAULT 0   -- sum of (reported_at - issued_at) over them
);
CREATE INDEX workers_owner ON workers (owner);

-- One hand-out of a unit to a worker.
-- state: 'active' (held), 'reported' (a report was stored), 'expired' (deadline passed),
-- 'released' (given back by the worker), 'rejected' (its report was refused: false claim),
-- 'withdrawn' (the unit settled or the campaign stopped while it was held).
CREATE TABLE leases (
    id          INTEGER PRIMARY KEY,
    unit_id     INTEGER NOT NULL REFERENCES units(id),
    worker_id   INTEGER NOT NULL REFERENCES workers(id),
    owner       TEXT    NOT NULL,              -- = workers.owner (denormalised for the picker)
    net_prefix  TEXT    NOT NULL DEFAULT '',   -- peer /24 (IPv4) or /48 (IPv6) at lease time
    state       TEXT    NOT NULL DEFAULT 'active'
                CHECK (state IN ('active', 'reported', 'expired', 'released', 'rejected', 'withdrawn')),
    issued_at   INTEGER NOT NULL,
    deadline    INTEGER NOT NULL,
    heartbeat_at INTEGER,
    progress    REAL    NOT NULL DEFAULT 0,
    closed_at   INTEGER
);
CREATE INDEX leases_unit ON leases (unit_id, state);
CREATE INDEX leases_worker ON leases (worker_id, state);
CREATE INDEX leases_deadline ON leases (deadline) WHERE state = 'active';

-- A signed report, stored as received (body = the SignedReport JSON) plus parsed fields.
-- verdict: 'pending' (counted, unit not settled yet), 'agree' (in the settling majority),
-- 'disagree' (outvoted; its worker's error count was raised), 'rejected' (refused: a claimed
-- solution was false or outside the unit; counted as an error, never part of a vote).
CREATE TABLE reports (
    id          INTEGER PRIMARY KEY,
    lease_id    INTEGER NOT NULL UNIQUE REFERENCES leases(id),
    unit_id     INTEGER NOT NULL REFERENCES units(id),
    worker_id   INTEGER NOT NULL REFERENCES workers(id),
    owner       TEXT    NOT NULL,
    digest      TEXT    NOT NULL,
    candidates  INTEGER NOT NULL,              -- digest.candidates (as i64)
    solutions   TEXT    NOT NULL,              -- canonical JSON list of claimed solutions
    signature   TEXT    NOT NULL,              -- worker's Ed25519 over Report::canonical_bytes
    body        TEXT    NOT NULL,              -- the SignedReport JSON as received
    elapsed_s   REAL    NOT NULL DEFAULT 0,    -- worker-stated (informational)
    verdict     TEXT    NOT NULL DEFAULT 'pending'
                CHECK (verdict IN ('pending', 'agree', 'disagree', 'rejected')),
    reason      TEXT    NOT NULL DEFAULT '',   -- why it was rejected
    received_at INTEGER NOT NULL
);
CREATE INDEX reports_unit ON reports (unit_id);
CREATE INDEX reports_worker ON reports (worker_id);

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
