package data

import (
	"fmt"
	"slices"
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
// It needs two ints and a bool per row besides one row, and a map of
// the distinct keys.
func (d *Dataset) GroupBy(keys []string) (groups []Group, ungrouped int, err error) {
	if len(keys) != d.Rows {
		return nil, 0, fmt.Errorf("%w: %d group keys for %d rows", ErrConfig, len(keys), d.Rows)
	}
	// a counting sort: each distinct key's rank among the sorted keys,
	// then the rows placed by rank in their order (empty keys last)
	rank := map[string]int{}
	for _, k := range keys {
		if _, ok := rank[k]; !ok && k != "" {
			rank[k] = 0
		}
	}
	names := make([]string, 0, len(rank))
	for k := range rank {
		names = append(names, k)
	}
	slices.Sort(names)
	for i, k := range names {
		rank[k] = i
	}
	start := make([]int, len(names)+2)
	ranks := make([]int32, d.Rows)
	for i, k := range keys {
		r := len(names) // the empty key
		if k != "" {
			r = rank[k]
		}
		ranks[i] = int32(r)
		start[r+1]++
	}
	for i := 1; i < len(start); i++ {
		start[i] += start[i-1]
	}
	order := make([]int, d.Rows)
	for i, r := range ranks {
		order[start[r]] = i
		start[r]++
	}
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
