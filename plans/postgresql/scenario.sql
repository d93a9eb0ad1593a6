-- schema, data, keys, statistics
CREATE TABLE towns (
    town_no  int PRIMARY KEY,
    town     text NOT NULL UNIQUE,
    prefix   text NOT NULL UNIQUE
);
INSERT INTO towns
SELECT n, t, upper(left(t, 3))
FROM unnest(ARRAY['Aldermoor', 'Brackenfold', 'Cinderleigh', 'Dunmere', 'Elmstow', 'Fallowby', 'Gorsebridge', 'Hollinwick', 'Ivyford', 'Juniper Cross', 'Kestrelham', 'Larkhollow', 'Marshby', 'Nettlecombe', 'Oakhurst Vale', 'Pebblewick', 'Quillmoor', 'Rookham', 'Saltmarsh End', 'Thistlebury', 'Underfell', 'Vetchley', 'Wrenfield', 'Yarrowby', 'Zephyr Heath', 'Ashwyke', 'Tansyford', 'Cobblewick', 'Dovecote Green', 'Eskerby', 'Fernhollow', 'Glimmerdale', 'Heronmere', 'Inglenook', 'Kilnworth', 'Lantern Hill', 'Mosswater', 'Nightingale Cross', 'Orchardley', 'Pennyfold']) WITH ORDINALITY AS u(t, n);
CREATE TABLE clinics (
    clinic_id  int PRIMARY KEY,
    name       text NOT NULL,
    town       text NOT NULL,
    opened_on  date NOT NULL
);
INSERT INTO clinics
SELECT g, t.town || ' Animal Clinic', t.town, date '2012-03-01' + g * 97
FROM generate_series(1, 24) g JOIN towns t ON t.town_no = g;
CREATE TABLE vets (
    vet_id       int PRIMARY KEY,
    clinic_id    int NOT NULL REFERENCES clinics,
    full_name    text NOT NULL,
    licensed_on  date NOT NULL
);
INSERT INTO vets
SELECT g, (g - 1) % 24 + 1, 'Vet ' || g, date '1995-01-01' + (g * 53) % 9000
FROM generate_series(1, 240) g;
-- owners: postcode -> town is a functional dependency (case correlated)
CREATE TABLE owners (
    owner_id   int PRIMARY KEY,
    full_name  text NOT NULL,
    email      text NOT NULL UNIQUE,
    town       text NOT NULL,
    postcode   text NOT NULL,
    signed_up  date NOT NULL
);
INSERT INTO owners
SELECT g,
       'Owner ' || g,
       'owner' || g || '@mail.example',
       t.town,
       t.prefix || '-' || lpad((g % 1000 % 25 + 1)::text, 2, '0'),
       date '2010-01-01' + (g * 7) % 5000
FROM generate_series(1, 60000) g
JOIN towns t ON t.town_no = g % 1000 / 25 + 1;
-- pets: 90k; owners have one or two
CREATE TABLE pets (
    pet_id     int PRIMARY KEY,
    owner_id   int NOT NULL,
    name       text NOT NULL,
    species    text NOT NULL,
    breed      text NOT NULL,
    microchip  text NOT NULL,
    born_on    date NOT NULL
);
INSERT INTO pets
SELECT g,
       (g - 1) * 7919 % 60000 + 1,
       (ARRAY['Biscuit','Pepper','Luna','Milo','Hazel','Otis','Juniper','Maple',
              'Pickle','Clover','Rusty','Willow','Bramble','Sprout','Fig','Nutmeg',
              'Poppy','Tofu','Basil','Mochi'])[g % 20 + 1],
       s.species,
       s.species || '-breed-' || (g % 7 + 1),
       '985' || lpad(g::text, 12, '0'),
       date '2008-01-01' + (g * 37) % 5800
FROM generate_series(1, 90000) g,
LATERAL (SELECT CASE WHEN g % 100 < 45 THEN 'dog'
                     WHEN g % 100 < 83 THEN 'cat'
                     WHEN g % 100 < 90 THEN 'rabbit'
                     WHEN g % 100 < 95 THEN 'bird'
                     WHEN g % 100 < 98 THEN 'reptile'
                     ELSE 'ferret' END AS species) s;
-- visits: 200k over 2021-2024; owner_id is a denormalised copy of the
-- pet's owner (case join_correlated); reason is skewed (case skewed)
CREATE TABLE visits (
    visit_id   int PRIMARY KEY,
    pet_id     int NOT NULL,
    owner_id   int NOT NULL,
    clinic_id  int NOT NULL,
    vet_id     int NOT NULL,
    visit_at   timestamptz NOT NULL,
    reason     text NOT NULL,
    fee_cents  int NOT NULL
);
INSERT INTO visits
SELECT g, p.pet_id, (p.pet_id - 1) * 7919 % 60000 + 1,
       (v.vet_id - 1) % 24 + 1, v.vet_id,
       timestamptz '2021-01-04 08:00:00+00'
         + ((g - 1)::bigint * 1457 / 200000) * interval '1 day'
         + (g * 5 % 10) * interval '1 hour'
         + (g * 13 % 4) * interval '15 minutes',
       CASE WHEN g * 7 % 100 < 45 THEN 'wellness-check'
            WHEN g * 7 % 100 < 65 THEN 'vaccination'
            ELSE 'dx-' || lpad((g::bigint * 7919 % 1500)::text, 4, '0') END,
       2500 + g * 131 % 20000
FROM generate_series(1, 200000) g,
LATERAL (SELECT ((g - 1)::bigint * 104729 % 90000 + 1)::int AS pet_id) p,
LATERAL (SELECT ((g - 1) * 37 % 240 + 1)::int AS vet_id) v;
-- invoices: one per visit; numbering jumped from 220000 to 900001 when
-- billing moved to a new system (case range_gap)
CREATE TABLE invoices (
    invoice_no   bigint PRIMARY KEY,
    visit_id     int NOT NULL UNIQUE,
    owner_id     int NOT NULL,
    issued_at    timestamptz NOT NULL,
    total_cents  int NOT NULL,
    paid         boolean NOT NULL
);
INSERT INTO invoices
SELECT CASE WHEN v.visit_id <= 120000 THEN 100000 + v.visit_id
            ELSE 900000 + (v.visit_id - 120000) END,
       v.visit_id, v.owner_id,
       v.visit_at + interval '2 hours',
       v.fee_cents + v.visit_id * 17 % 5000,
       v.visit_id % 23 <> 0
FROM visits v;
-- appointments: booked ahead; the first 10k came from the old practice
-- software with long free-text notes (wide rows); autovacuum is off on this
-- table and the staleness step adds narrow rows after ANALYZE (case stale)
CREATE TABLE appointments (
    appointment_id  int PRIMARY KEY,
    pet_id          int NOT NULL,
    clinic_id       int NOT NULL,
    created_at      timestamptz NOT NULL,
    slot_at         timestamptz NOT NULL,
    channel         text NOT NULL,
    notes           text
) WITH (autovacuum_enabled = off);
INSERT INTO appointments
SELECT g, (g - 1) * 104729 % 90000 + 1, g % 24 + 1,
       timestamptz '2021-01-01 09:00:00+00' + ((g - 1)::bigint * 1276 / 10000) * interval '1 day',
       timestamptz '2021-01-01 09:00:00+00' + ((g - 1)::bigint * 1276 / 10000 + 3 + g % 20) * interval '1 day',
       'phone',
       'Imported from the previous practice system. ' || repeat(md5(g::text), 55)
FROM generate_series(1, 10000) g;
-- pharmacy sales, partitioned by year (case append)
CREATE TABLE pharmacy_sales (
    sale_id    int NOT NULL,
    clinic_id  int NOT NULL,
    product    text NOT NULL,
    qty        int NOT NULL,
    sold_at    timestamptz NOT NULL
) PARTITION BY RANGE (sold_at);
CREATE TABLE pharmacy_sales_2021 PARTITION OF pharmacy_sales FOR VALUES FROM ('2021-01-01') TO ('2022-01-01');
CREATE TABLE pharmacy_sales_2022 PARTITION OF pharmacy_sales FOR VALUES FROM ('2022-01-01') TO ('2023-01-01');
CREATE TABLE pharmacy_sales_2023 PARTITION OF pharmacy_sales FOR VALUES FROM ('2023-01-01') TO ('2024-01-01');
CREATE TABLE pharmacy_sales_2024 PARTITION OF pharmacy_sales FOR VALUES FROM ('2024-01-01') TO ('2025-01-01');
INSERT INTO pharmacy_sales
SELECT g, g % 24 + 1, 'product-' || lpad((g * 11 % 30 + 1)::text, 2, '0'), 1 + g % 4,
       timestamptz '2021-01-01 10:00:00+00' + ((g - 1)::bigint * 1460 / 40000) * interval '1 day'
FROM generate_series(1, 40000) g;
-- reminders: empty; only the rolled-back INSERT of case modify uses it
CREATE TABLE reminders (
    reminder_id  bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    pet_id       int NOT NULL REFERENCES pets,
    due_on       date NOT NULL,
    kind         text NOT NULL
);
CREATE INDEX owners_postcode_idx ON owners (postcode);
CREATE INDEX pets_owner_idx ON pets (owner_id);
CREATE INDEX visits_pet_idx ON visits (pet_id);
CREATE INDEX visits_visit_at_idx ON visits (visit_at);
CREATE INDEX visits_vet_at_idx ON visits (vet_id, visit_at);
CREATE INDEX invoices_owner_idx ON invoices (owner_id);
ALTER TABLE pets ADD FOREIGN KEY (owner_id) REFERENCES owners;
ALTER TABLE visits ADD FOREIGN KEY (pet_id) REFERENCES pets;
ALTER TABLE visits ADD FOREIGN KEY (vet_id) REFERENCES vets;
ALTER TABLE invoices ADD FOREIGN KEY (visit_id) REFERENCES visits;
-- case skewed: someone lowered the statistics target of this column
ALTER TABLE visits ALTER COLUMN reason SET STATISTICS 1;
-- statistics as of "last night"
VACUUM ANALYZE;

-- planted staleness: rows added after the last ANALYZE
-- online booking opened on 2024-07-01 (after the last ANALYZE)
INSERT INTO appointments
SELECT 10000 + g, (g - 1) * 7919 % 90000 + 1, g % 24 + 1,
       timestamptz '2024-07-01 00:00:00+00' + (g - 1) * interval '78 seconds',
       timestamptz '2024-07-01 00:00:00+00' + (g - 1) * interval '78 seconds' + (1 + g % 30) * interval '1 day',
       'online',
       NULL
FROM generate_series(1, 200000) g;
