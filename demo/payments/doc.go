// Package payments invents the demo's table of card payments: the
// records a payments service keeps, with an identifier, a time, text
// categories (merchant category, channel, country), an amount, a yes/no
// column, a device identifier and empty cells, and a hold-out month with
// fraud of known patterns injected among normal payments. Everything is
// drawn from a seed; nothing is real.
package payments
