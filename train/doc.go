// Package train trains every kind of model: autoencoders (package ae),
// VAEs (vae) and GANs (gan). The models hold only what inference needs;
// everything training needs beside the weights lives here, in a Trainer:
// the compiled graphs, the optimisers, the random generators, the history
// and any state of the kind's own.
//
//	m, _ := ae.New(ae.Config{Inputs: 6, Latent: 3, Seed: 1})
//	t, _ := train.New(m, train.Settings{Epochs: 30, Patience: 5})
//	h, err := t.Run(ctx, trainRows, validationRows)
//
// Settings hold what every kind shares (epochs, batch size, early
// stopping, the Optimizer: Adam with decoupled weight decay, clipping and a
// learning-rate schedule, the same struct for every kind) and the kind's
// Objective: Reconstruction (input corruption, sparsity, a classification
// head's weight), Variational (the KL weight, its schedule, free bits) or
// Adversarial (the generator's loss, extra discriminator steps, label
// smoothing, the warnings). Zero fields mean the documented defaults;
// New validates them against the model's kind.
//
// One loop runs every kind. Each epoch it shuffles the rows into batches
// (from the model's Seed, stream.Shuffle), and for each batch runs the
// kind's moves: a move fills one compiled graph with the batch, runs it
// forward and backward, clips the gradients and lets its optimiser update
// the parameters that graph differentiates. An autoencoder or a VAE has
// one move; a GAN has a discriminator move (repeated DiscSteps times) and
// a generator move, each of which leaves the other network's weights
// bitwise unchanged. After each epoch the loop evaluates the validation
// rows, keeps the History, stops early when asked (restoring the best
// epoch's weights), and calls the callbacks. A NaN or infinite loss or
// gradient stops training with a *NonFiniteError naming the epoch and
// step; cancelling the context stops between steps.
//
// The objectives come from package losses (their graph forms); the
// graphs are built and run by the engine, gorgonia underneath, which no
// package outside training imports.
//
// Checkpoint writes a model file with the training state (optimiser
// moments, generator states, history, typed settings); Resume continues
// such a run bitwise as if it had never stopped, and also resumes the
// checkpoints written before settings were stored. File writes the model
// with a "training" section (the settings and a summary) that SummaryOf
// reads back.
//
// Same seed, same data, same settings: bitwise the same model, at any
// thread count.
package train
