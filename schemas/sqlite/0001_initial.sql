-- 0001_initial: the experiment, its layout and protocols, the field records,
-- the local device identity and the change log.
--
-- Every data table mirrors one Table Schema in schemas/tables/<table>.json
-- (same columns in the same order; a test keeps them in step) plus a
-- `deleted` tombstone flag: nothing is hard-deleted. Unique keys are partial
-- indexes over live rows so that a tombstoned label can be used again.
-- Data tables are STRICT so that a wrong type can never be stored silently.

-- This device: made once per database. next_seq numbers this device's
-- change-log entries; hlc is the highest hybrid-logical-clock value seen.
CREATE TABLE local_device (
    singleton INTEGER PRIMARY KEY CHECK (singleton = 1),
    device_id TEXT NOT NULL,
    name TEXT NOT NULL,
    next_seq INTEGER NOT NULL CHECK (next_seq >= 1),
    hlc INTEGER NOT NULL CHECK (hlc >= 0),
    created_at TEXT NOT NULL
) STRICT;

-- The change log: one row per changed field (per row for a delete), written in
-- the same transaction as the change. It is the audit trail and the sync source.
-- old_value / new_value are ANY so that each value keeps its SQLite type.
CREATE TABLE change_log (
    device_id TEXT NOT NULL,
    seq INTEGER NOT NULL CHECK (seq >= 1),
    hlc INTEGER NOT NULL,
    table_name TEXT NOT NULL,
    row_id TEXT NOT NULL,
    op TEXT NOT NULL CHECK (op IN ('insert', 'update', 'delete')),
    field TEXT,
    old_value ANY,
    new_value ANY,
    PRIMARY KEY (device_id, seq)
) STRICT, WITHOUT ROWID;

CREATE INDEX change_log_row_idx ON change_log (table_name, row_id, field);

-- Experiment: One row: the experiment this database records.
CREATE TABLE experiment (
    id TEXT PRIMARY KEY NOT NULL,
    code TEXT NOT NULL,
    title TEXT NOT NULL,
    start_date TEXT NOT NULL,
    end_date TEXT,
    utc_offset TEXT NOT NULL,
    design TEXT NOT NULL,
    randomisation_seed INTEGER,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX experiment_code_key ON experiment (code) WHERE deleted = 0;

-- Site: A field site of the experiment.
CREATE TABLE site (
    id TEXT PRIMARY KEY NOT NULL,
    experiment_id TEXT NOT NULL REFERENCES experiment(id),
    code TEXT NOT NULL,
    name TEXT NOT NULL,
    latitude REAL,
    longitude REAL,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX site_code_key ON site (code) WHERE deleted = 0;

CREATE INDEX site_experiment_id_idx ON site (experiment_id);

-- Block: A block of enclosures sharing local conditions; each block holds every treatment once.
CREATE TABLE block (
    id TEXT PRIMARY KEY NOT NULL,
    site_id TEXT NOT NULL REFERENCES site(id),
    code TEXT NOT NULL,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX block_code_key ON block (code) WHERE deleted = 0;

CREATE INDEX block_site_id_idx ON block (site_id);

-- Treatment: An experimental treatment applied to enclosures.
CREATE TABLE treatment (
    id TEXT PRIMARY KEY NOT NULL,
    experiment_id TEXT NOT NULL REFERENCES experiment(id),
    code TEXT NOT NULL,
    name TEXT NOT NULL,
    herbivores INTEGER NOT NULL CHECK (herbivores IN (0, 1)),
    predator_mode TEXT NOT NULL,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX treatment_code_key ON treatment (code) WHERE deleted = 0;

CREATE INDEX treatment_experiment_id_idx ON treatment (experiment_id);

-- Enclosure: A mesh cage enclosing a plot; the experimental unit.
CREATE TABLE enclosure (
    id TEXT PRIMARY KEY NOT NULL,
    block_id TEXT NOT NULL REFERENCES block(id),
    label TEXT NOT NULL,
    area_m2 REAL NOT NULL,
    height_m REAL,
    mesh_mm REAL,
    x_m REAL,
    y_m REAL,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX enclosure_label_key ON enclosure (label) WHERE deleted = 0;

CREATE INDEX enclosure_block_id_idx ON enclosure (block_id);

-- Taxon: A plant or animal taxon recorded in the experiment.
CREATE TABLE taxon (
    id TEXT PRIMARY KEY NOT NULL,
    experiment_id TEXT NOT NULL REFERENCES experiment(id),
    code TEXT NOT NULL,
    scientific_name TEXT NOT NULL,
    common_name TEXT,
    role TEXT NOT NULL,
    plant_group TEXT,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX taxon_code_key ON taxon (code) WHERE deleted = 0;

CREATE INDEX taxon_experiment_id_idx ON taxon (experiment_id);

-- Scale: A class scale for cover or leaf damage; its classes are in scale_class.
CREATE TABLE scale (
    id TEXT PRIMARY KEY NOT NULL,
    code TEXT NOT NULL,
    name TEXT NOT NULL,
    kind TEXT NOT NULL,
    source TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX scale_code_key ON scale (code) WHERE deleted = 0;

-- Scale class: One class of a scale: code, range in percent and the midpoint used to convert it.
CREATE TABLE scale_class (
    id TEXT PRIMARY KEY NOT NULL,
    scale_id TEXT NOT NULL REFERENCES scale(id),
    code TEXT NOT NULL,
    sort_order INTEGER NOT NULL,
    lower_pct REAL,
    upper_pct REAL,
    midpoint_pct REAL NOT NULL,
    ordinal INTEGER,
    description TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX scale_class_scale_id_code_key ON scale_class (scale_id, code) WHERE deleted = 0;

-- Stocking plan: How many animals of a taxon each enclosure of a treatment receives.
CREATE TABLE stocking_plan (
    id TEXT PRIMARY KEY NOT NULL,
    treatment_id TEXT NOT NULL REFERENCES treatment(id),
    taxon_id TEXT NOT NULL REFERENCES taxon(id),
    initial_count INTEGER NOT NULL,
    restock_below INTEGER,
    stage TEXT,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX stocking_plan_treatment_id_taxon_id_key ON stocking_plan (treatment_id, taxon_id) WHERE deleted = 0;

CREATE INDEX stocking_plan_taxon_id_idx ON stocking_plan (taxon_id);

-- Assignment: Which treatment an enclosure received, and how it was allocated.
CREATE TABLE assignment (
    id TEXT PRIMARY KEY NOT NULL,
    enclosure_id TEXT NOT NULL REFERENCES enclosure(id),
    treatment_id TEXT NOT NULL REFERENCES treatment(id),
    method TEXT NOT NULL,
    seed INTEGER,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX assignment_enclosure_id_key ON assignment (enclosure_id) WHERE deleted = 0;

CREATE INDEX assignment_treatment_id_idx ON assignment (treatment_id);

-- Cover protocol: How plant cover is estimated in every enclosure.
CREATE TABLE cover_protocol (
    id TEXT PRIMARY KEY NOT NULL,
    experiment_id TEXT NOT NULL REFERENCES experiment(id),
    code TEXT NOT NULL,
    method TEXT NOT NULL,
    scale_id TEXT REFERENCES scale(id),
    layered INTEGER NOT NULL CHECK (layered IN (0, 1)),
    pins_per_frame INTEGER,
    hit_rule TEXT,
    tolerance_pct REAL NOT NULL,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX cover_protocol_code_key ON cover_protocol (code) WHERE deleted = 0;

CREATE INDEX cover_protocol_experiment_id_idx ON cover_protocol (experiment_id);

CREATE INDEX cover_protocol_scale_id_idx ON cover_protocol (scale_id);

-- Ground category: A non-plant cover category (litter, bare soil, ...) of a cover protocol.
CREATE TABLE ground_category (
    id TEXT PRIMARY KEY NOT NULL,
    protocol_id TEXT NOT NULL REFERENCES cover_protocol(id),
    code TEXT NOT NULL,
    name TEXT NOT NULL,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX ground_category_protocol_id_code_key ON ground_category (protocol_id, code) WHERE deleted = 0;

-- Damage protocol: How leaf damage is scored on tagged leaves.
CREATE TABLE damage_protocol (
    id TEXT PRIMARY KEY NOT NULL,
    experiment_id TEXT NOT NULL REFERENCES experiment(id),
    code TEXT NOT NULL,
    method TEXT NOT NULL,
    scale_id TEXT REFERENCES scale(id),
    leaves_per_enclosure INTEGER NOT NULL,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX damage_protocol_code_key ON damage_protocol (code) WHERE deleted = 0;

CREATE INDEX damage_protocol_experiment_id_idx ON damage_protocol (experiment_id);

CREATE INDEX damage_protocol_scale_id_idx ON damage_protocol (scale_id);

-- Schedule entry: A planned visit of one kind on one day of the experiment, for every enclosure.
CREATE TABLE schedule_entry (
    id TEXT PRIMARY KEY NOT NULL,
    experiment_id TEXT NOT NULL REFERENCES experiment(id),
    kind TEXT NOT NULL,
    day INTEGER NOT NULL,
    grace_days INTEGER NOT NULL,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX schedule_entry_kind_day_key ON schedule_entry (kind, day) WHERE deleted = 0;

CREATE INDEX schedule_entry_experiment_id_idx ON schedule_entry (experiment_id);

-- Tagged leaf: A marked leaf whose damage is scored at every damage visit.
CREATE TABLE tagged_leaf (
    id TEXT PRIMARY KEY NOT NULL,
    enclosure_id TEXT NOT NULL REFERENCES enclosure(id),
    taxon_id TEXT NOT NULL REFERENCES taxon(id),
    tag_label TEXT NOT NULL,
    plant_label TEXT,
    tagged_on TEXT NOT NULL,
    fate TEXT,
    fate_on TEXT,
    replaces_leaf_id TEXT REFERENCES tagged_leaf(id),
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX tagged_leaf_tag_label_key ON tagged_leaf (tag_label) WHERE deleted = 0;

CREATE INDEX tagged_leaf_enclosure_id_idx ON tagged_leaf (enclosure_id);

CREATE INDEX tagged_leaf_taxon_id_idx ON tagged_leaf (taxon_id);

CREATE INDEX tagged_leaf_replaces_leaf_id_idx ON tagged_leaf (replaces_leaf_id);

-- Visit: One visit of one kind to one enclosure.
CREATE TABLE visit (
    id TEXT PRIMARY KEY NOT NULL,
    enclosure_id TEXT NOT NULL REFERENCES enclosure(id),
    kind TEXT NOT NULL,
    day INTEGER,
    visited_at TEXT NOT NULL,
    observer TEXT,
    device TEXT,
    completed INTEGER NOT NULL CHECK (completed IN (0, 1)),
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE INDEX visit_enclosure_id_idx ON visit (enclosure_id);

-- Stocking event: Animals put into or taken out of an enclosure.
CREATE TABLE stocking_event (
    id TEXT PRIMARY KEY NOT NULL,
    visit_id TEXT NOT NULL REFERENCES visit(id),
    taxon_id TEXT NOT NULL REFERENCES taxon(id),
    kind TEXT NOT NULL,
    count INTEGER NOT NULL,
    stage TEXT,
    sex TEXT,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE INDEX stocking_event_visit_id_idx ON stocking_event (visit_id);

CREATE INDEX stocking_event_taxon_id_idx ON stocking_event (taxon_id);

-- Census: Animals of one taxon found in an enclosure at a census visit. 0 = looked, none; empty = not assessed.
CREATE TABLE census (
    id TEXT PRIMARY KEY NOT NULL,
    visit_id TEXT NOT NULL REFERENCES visit(id),
    taxon_id TEXT NOT NULL REFERENCES taxon(id),
    alive INTEGER,
    dead INTEGER,
    missing INTEGER,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX census_visit_id_taxon_id_key ON census (visit_id, taxon_id) WHERE deleted = 0;

CREATE INDEX census_taxon_id_idx ON census (taxon_id);

-- Cover record: Cover of one plant taxon or one ground category at a cover visit. 0 = looked, absent; empty = not assessed.
CREATE TABLE cover_record (
    id TEXT PRIMARY KEY NOT NULL,
    visit_id TEXT NOT NULL REFERENCES visit(id),
    taxon_id TEXT REFERENCES taxon(id),
    category TEXT,
    value_pct REAL,
    class_code TEXT,
    pin_hits INTEGER,
    cover_pct REAL,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1)),
    -- a cover row is about either a plant taxon or a ground category, never both
    CHECK ((taxon_id IS NULL) <> (category IS NULL))
) STRICT;

CREATE UNIQUE INDEX cover_record_visit_id_taxon_id_category_key ON cover_record (visit_id, coalesce(taxon_id, ''), coalesce(category, '')) WHERE deleted = 0;

CREATE INDEX cover_record_taxon_id_idx ON cover_record (taxon_id);

-- Damage record: Damage on one tagged leaf at a damage visit.
CREATE TABLE damage_record (
    id TEXT PRIMARY KEY NOT NULL,
    visit_id TEXT NOT NULL REFERENCES visit(id),
    leaf_id TEXT NOT NULL REFERENCES tagged_leaf(id),
    class_code TEXT,
    value_pct REAL,
    damage_pct REAL,
    notes TEXT,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1))
) STRICT;

CREATE UNIQUE INDEX damage_record_visit_id_leaf_id_key ON damage_record (visit_id, leaf_id) WHERE deleted = 0;

CREATE INDEX damage_record_leaf_id_idx ON damage_record (leaf_id);
