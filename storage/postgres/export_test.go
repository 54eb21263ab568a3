package postgres

import "context"

// MigrateTo moves the schema up or down to version, for tests of a migration's data
// handling (beamledger itself only ever migrates up, with Migrate).
func (db *DB) MigrateTo(ctx context.Context, version int64) error {
	p, sqlDB, err := db.provider(nil)
	if err != nil {
		return err
	}
	defer sqlDB.Close()
	current, err := p.GetDBVersion(ctx)
	if err != nil {
		return err
	}
	if version < current {
		_, err = p.DownTo(ctx, version)
	} else {
		_, err = p.UpTo(ctx, version)
	}
	return err
}
