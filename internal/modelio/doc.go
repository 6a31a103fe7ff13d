// Package modelio is what the model kinds (ae, vae, gan) share in their
// model files and their graph-free passes: the rows they were trained on
// (scaler and schema), writing a kind's metadata and parameters as a model
// file, and the checks a loader makes before building anything.
package modelio
