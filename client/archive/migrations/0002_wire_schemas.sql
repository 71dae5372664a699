-- taprig archive, schema 2: the wire schemas a point set's body may be written in, each
-- described once, so a reader in SQL knows how a body's arrays and hit records are kept;
-- a body of a schema the archive does not describe is refused. Schema 3 of the wire keeps a
-- hit's record as the device's integer codes with a scale (SI units per count) per channel.
-- Bodies already archived stay byte for byte as their rig served them.
-- Documented in client/archive/SCHEMA.md.

CREATE TABLE wire_schemas (
    version      integer PRIMARY KEY CHECK (version >= 1),
    spectra      text NOT NULL,
    hit_records  text NOT NULL
);
INSERT INTO wire_schemas (version, spectra, hit_records) VALUES
    (1, 'float64 / complex128', 'float32 SI values (N, m/s²), no scale'),
    (2, 'float32 / complex64', 'float32 SI values (N, m/s²), no scale'),
    (3, 'float32 / complex64',
     'int16 or int32 device codes with scale (SI units per count, float64 per channel); '
     'float32 SI values with scale 1.0 from a device without codes');

ALTER TABLE point_sets
    ADD CONSTRAINT point_sets_schema_version_fkey
    FOREIGN KEY (schema_version) REFERENCES wire_schemas (version);
