// Package browser drives a headless Chromium for the tests of the pages
// quern writes and serves: it starts the browser, opens a page, collects
// console errors and uncaught exceptions, and evaluates expressions in the
// page. It speaks the Chrome DevTools Protocol over a WebSocket (RFC 6455)
// with the standard library only.
//
// Tests call Start and skip when no browser is installed, unless the
// environment variable CI is set, where a missing browser fails the test.
package browser
