package data

import (
	"fmt"
	"slices"
	"strings"
)

// Group is one group of a Dataset's rows: a view of the rows whose key is
// Key, in the order the file gave them.
type Group struct {
	Key  string
	Data *Dataset
}

// GroupBy reorders d's rows in place so that the rows of each key are
// adjacent (keys in sorted order, rows in their first order within a
// key) and returns each key's rows as a view of d's memory: no row is
// copied, so a table of groups costs what the table does. keys holds one
// key per row; rows with an empty key are left out of every group and
// counted in ungrouped (they stay at the end of d). The views keep d's
// columns, image shape and encoding, not its kept texts or notes; d's
// own Kept and Notes are dropped, since they no longer match its rows.
// It needs an int and a bool per row besides one row.
func (d *Dataset) GroupBy(keys []string) (groups []Group, ungrouped int, err error) {
	if len(keys) != d.Rows {
		return nil, 0, fmt.Errorf("%w: %d group keys for %d rows", ErrConfig, len(keys), d.Rows)
	}
	order := make([]int, d.Rows)
	for i := range order {
		order[i] = i
	}
	// empty keys last; a stable sort keeps the file's order in a group
	slices.SortStableFunc(order, func(a, b int) int {
		ka, kb := keys[a], keys[b]
		if (ka == "") != (kb == "") {
			if ka == "" {
				return 1
			}
			return -1
		}
		return strings.Compare(ka, kb)
	})
	d.gather(order)
	d.Kept, d.KeptColumns, d.Notes = nil, nil, nil
	for lo := 0; lo < d.Rows; {
		k := keys[order[lo]]
		if k == "" {
			ungrouped = d.Rows - lo
			break
		}
		hi := lo + 1
		for hi < d.Rows && keys[order[hi]] == k {
			hi++
		}
		v := &Dataset{Rows: hi - lo, Cols: d.Cols, X: d.X[lo*d.Cols : hi*d.Cols : hi*d.Cols], Columns: d.Columns, Image: d.Image, Encoding: d.Encoding}
		if d.Labels != nil {
			v.Labels = d.Labels[lo:hi:hi]
		}
		groups = append(groups, Group{Key: k, Data: v})
		lo = hi
	}
	return groups, ungrouped, nil
}
