package store

import (
	"context"
	"database/sql"
	"errors"
	"strings"
)

// DefaultPlantTimeZone is the plant's time zone until one is set.
const DefaultPlantTimeZone = "UTC"

// PlantTimeZone returns the plant's time zone: the zone a new process gets
// when none is given, so that a plant in Berlin does not find its new
// processes' days and weeks cut at midnight UTC.
func (db *DB) PlantTimeZone(ctx context.Context) (string, error) {
	var tz string
	err := db.r.QueryRowContext(ctx, "SELECT value FROM plant_settings WHERE key = 'time_zone'").Scan(&tz)
	if errors.Is(err, sql.ErrNoRows) {
		return DefaultPlantTimeZone, nil
	}
	return tz, err
}

// SetPlantTimeZone sets the plant's time zone, an IANA name, with a
// reason; the change is in the audit trail (entity "plant"). It changes
// no existing process: each keeps its own zone.
func (db *DB) SetPlantTimeZone(ctx context.Context, actor, reason, tz string) error {
	tz = strings.TrimSpace(tz)
	var ps []Problem
	if _, err := loadLocation(tz); err != nil || tz == "" || tz == "Local" {
		ps = append(ps, Problem{Field: "tz", Value: tz, Reason: "is not an IANA time zone name (e.g. Europe/Berlin, America/Chicago, UTC)"})
	}
	ps = append(ps, checkReason(reason, "say why the plant's time zone changes")...)
	if len(ps) > 0 {
		return invalid(ps...)
	}
	return db.write(ctx, func(w *wtx) error {
		old, err := plantTimeZoneIn(w.Tx)
		if err != nil {
			return err
		}
		if _, err := w.Exec("INSERT INTO plant_settings (key, value) VALUES ('time_zone', ?) ON CONFLICT(key) DO UPDATE SET value = excluded.value", tz); err != nil {
			return err
		}
		return w.audit(actor, "update", "plant", 0, 0, map[string]string{"time_zone": old}, map[string]string{"time_zone": tz}, reason)
	})
}

func plantTimeZoneIn(tx *sql.Tx) (string, error) {
	var tz string
	err := tx.QueryRow("SELECT value FROM plant_settings WHERE key = 'time_zone'").Scan(&tz)
	if errors.Is(err, sql.ErrNoRows) {
		return DefaultPlantTimeZone, nil
	}
	return tz, err
}
