// Package train is the one training loop that ae, vae and gan share.
//
// Run walks a dataset for a number of epochs in shuffled mini-batches drawn
// from a seeded generator, asks the model (a Trainee) to take one step per
// batch, evaluates a validation set after every epoch, and keeps a History.
// It provides:
//
//   - early stopping with patience (and MinDelta) on the validation loss,
//     restoring the best epoch's weights unless KeepLast is set;
//   - an OnStep callback with the epoch, the step, the step's metrics,
//     samples per second and an estimate of the time left, and an OnEpoch
//     callback that can stop training by returning an error (checkpoint
//     writers use it);
//   - cancellation through a context, checked between steps;
//   - a typed *NonFiniteError naming the epoch and step at which a loss or
//     gradient became NaN or infinite;
//   - resumption from a saved History.
//
// Metrics are reported as a slice whose first entry is the loss, so that a
// model can add its own figures (reconstruction, KL, discriminator
// accuracy, ...) without the loop knowing them.
package train
