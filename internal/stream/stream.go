package stream

const (
	// Init draws a model's initial weights (and, for a GAN, its spectral
	// normalisation vectors).
	Init uint64 = 0
	// Shuffle orders the training rows into batches each epoch.
	Shuffle uint64 = 1
	// Noise draws everything random in a training step: input
	// corruption, dropout masks, a VAE's reparameterisation noise, a
	// GAN's generator noise and the rows of its extra discriminator
	// steps.
	Noise uint64 = 2
	// Evaluation draws the noise of a validation pass, afresh for each
	// pass so that repeated evaluations agree.
	Evaluation uint64 = 3
	// Split holds out the validation rows in the command line and the
	// demo.
	Split uint64 = 7
	// Fleet invents the demo's pump fleet.
	Fleet uint64 = 0xf1ee7
	// Payments invents the demo's card payments.
	Payments uint64 = 0xca4d
	// PriorSample draws a VAE's latent rows from its prior.
	PriorSample uint64 = 0x5a
	// ObservationDraws draws a table VAE's samples from its likelihood
	// given the decoded latent rows (a category's level, a number's
	// noise).
	ObservationDraws uint64 = 0x0b5
	// GeneratorInput draws a GAN generator's noise (and classes) when
	// sampling.
	GeneratorInput uint64 = 0x6e
	// ELBODraws and IWAEDraws draw the reparameterised samples behind a
	// VAE's ELBO and importance-weighted bound.
	ELBODraws uint64 = 0xe1
	IWAEDraws uint64 = 0x1e
	// Group derives each fleet member's seed from the run's seed and the
	// group's name (xor its FNV-1a hash), so that a member is the same
	// model whichever shard or process trains it.
	Group uint64 = 0x6a0c
	// Sample draws a streamed table's sample of its training rows.
	Sample uint64 = 0x5a3b
)

// ScoreSeed is the seed of a VAE's density score: its draws come from
// (ScoreSeed, ELBODraws), so a row's score never changes.
const ScoreSeed uint64 = 0x5c07e
