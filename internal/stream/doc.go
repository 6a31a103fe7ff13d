// Package stream names the math/rand/v2 PCG streams quern draws from. A
// generator is rand.NewPCG(seed, stream): the seed comes from the user (a
// model's Seed, a sample request's seed), the stream from this table, so
// that no two uses of one seed share draws. The values are part of the
// reproducibility contract: changing one changes every model trained or
// sampled with it, and checkpoints store the training generators' states.
package stream
