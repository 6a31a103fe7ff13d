// Package fleet keeps many models of one kind, one per group of rows (a
// pump, a site, a merchant), in one folder: a model file per group, a
// shared model for the groups with too few rows of their own, and an
// index, fleet.json, that names them.
//
// The folder's layout:
//
//	fleet.json              the Index: the group column, the seed, each member
//	g-<name>-<hash>.qm      one model file per group (FileName)
//	shared.qm               the shared model (SharedFile), if any
//	part-<i>-of-<n>.json    a shard's part of the index (Part), before Merge
//
// Training is the command line's (quern train -group COLUMN); this
// package holds what every step agrees on so that a fleet trained in one
// process equals, bit for bit, one trained in shards on many machines and
// merged: each group's seed comes from the run's seed and the group's name
// alone (SeedFor), each group belongs to one shard by its place among the
// sorted names (Shard.Owns), and the index holds no time, host or shard.
//
// Open reads a fleet for inference: each member's file is checked against
// its hash and decoded (model.Decode), and Fleet.Route finds the model for
// a group, falling back to the shared model for a group without one of
// its own. A Fleet is safe for concurrent use; Reload opens the files
// that changed (or one member) and swaps the new set in at once, while
// requests keep being answered.
package fleet
