// Package optim updates parameters from their gradients: SGD with momentum
// and Nesterov momentum, Adam with bias correction (Kingma & Ba 2015,
// Algorithm 1), AdamW with decoupled weight decay (Loshchilov & Hutter
// 2019) and RMSprop, plus clipping by global norm and learning-rate
// schedules (step decay, cosine, linear warm-up).
//
// Each method is built from a Config struct whose zero fields are the
// documented defaults and is validated up front (errors wrap ErrConfig).
// Updates work in place on the parameters' own storage, float32 or float64,
// and allocate nothing after the first update of a parameter set. State
// (moments, velocities and the step count) is exported as a State keyed by
// parameter name and restored with Import, which is how checkpoints resume
// bitwise.
//
// The update rules follow the same conventions as the common general-purpose
// implementations; tests replay 20-step trajectories recorded with one of
// them (testdata/optim/make_golden.py) and agree to 1e-6 relative.
package optim
