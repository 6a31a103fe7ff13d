// Package serve answers JSON requests over HTTP with a trained model: the
// server behind "quern serve", usable as an http.Handler in a service of
// your own.
//
// Routes:
//
//	POST /v1/score        {"rows": [[...], ...], "top": 3}  autoencoder anomaly scores
//	POST /v1/encode       {"rows": [[...], ...]}            codes / embeddings (ae, vae)
//	POST /v1/reconstruct  {"rows": [[...], ...]}            reconstructions (ae, vae)
//	POST /v1/sample       {"count": n, "seed": s, "class": k}  samples (vae, gan)
//	POST /admin/reload                                       reload the model file
//	GET  /healthz, /readyz                                   liveness and readiness
//	GET  /metrics                                            Prometheus text format
//
// Every error is a 4xx or 5xx with a JSON body {"error": "..."} naming the
// problem (malformed JSON, a row with the wrong number of columns, a null
// or out-of-range value, an oversized body, too many rows, an unknown
// route). Limits on body size and rows, read, write and idle timeouts, an
// optional bearer token, structured logs through log/slog, and graceful
// shutdown that drains requests in flight are configured in Config.
//
// Reloading swaps the new model in atomically: requests in flight finish
// with the model they started with, and a bad file is refused while the
// current model keeps serving. Score responses carry the caution that
// scores are a decision aid, calibrated only for data like the training
// data.
package serve
