package postgres

import (
	"fmt"
	"strings"

	"beamledger"
	"beamledger/accounts"
)

// filter builds a WHERE clause from conditions and their arguments, so that values
// always travel as parameters and never inside the SQL text.
type filter struct {
	conds []string
	args  []any
}

// arg adds a value and returns its placeholder.
func (f *filter) arg(v any) string {
	f.args = append(f.args, v)
	return fmt.Sprintf("$%d", len(f.args))
}

// where adds a condition written with placeholders from arg.
func (f *filter) where(cond string) { f.conds = append(f.conds, cond) }

// ids adds "column = $n" for each non-empty id, refusing a malformed one with an
// Invalid error naming its field (the column without any table prefix).
func (f *filter) ids(pairs ...[2]string) error {
	for _, p := range pairs {
		col, val := p[0], p[1]
		if val == "" {
			continue
		}
		if !accounts.ValidID(val) {
			field := col[strings.LastIndex(col, ".")+1:]
			return beamledger.InvalidField(field, "must be an id")
		}
		f.where(col + " = " + f.arg(val))
	}
	return nil
}

// sql returns " WHERE …" (or "") to append to a query.
func (f *filter) sql() string {
	if len(f.conds) == 0 {
		return ""
	}
	return " WHERE " + strings.Join(f.conds, " AND ")
}
