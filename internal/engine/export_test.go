package engine

// Log1pExpNeg32 exposes log1pExpNeg32 to the tests.
var Log1pExpNeg32 = log1pExpNeg32
