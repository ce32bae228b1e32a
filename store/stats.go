package store

import (
	"context"
	"os"
)

// LotCount is the number of lots stored in the database, voided ones
// included (nothing is ever deleted): what monitoring counts.
func (db *DB) LotCount(ctx context.Context) (int64, error) {
	var n int64
	err := db.r.QueryRowContext(ctx, "SELECT COUNT(*) FROM lots").Scan(&n)
	return n, err
}

// FileSize is the size on disk of the database in bytes: the file and
// its write-ahead log; on PostgreSQL, the tables of its schema with their
// indexes (there is no file of its own to measure).
func (db *DB) FileSize() (int64, error) {
	if db.d.size != "" {
		var n int64
		err := db.r.QueryRow(db.d.size).Scan(&n)
		return n, err
	}
	fi, err := os.Stat(db.path)
	if err != nil {
		return 0, err
	}
	n := fi.Size()
	if wal, err := os.Stat(db.path + "-wal"); err == nil {
		n += wal.Size()
	}
	return n, nil
}
