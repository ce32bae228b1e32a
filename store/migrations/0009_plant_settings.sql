-- 0008: settings of the plant as a whole, one value per key. The first is
-- time_zone, the IANA zone that new processes get when none is given
-- (UTC while unset). Changes are written through SetPlantTimeZone, which
-- records them in the audit trail.
CREATE TABLE plant_settings (
    key   TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
