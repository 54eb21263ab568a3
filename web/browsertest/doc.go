// Package browsertest drives beamledger's web pages in headless Chromium through the
// Chrome DevTools Protocol (chromedp), against a real server over the demo facility
// in a fresh PostgreSQL database. It holds only tests; it is the one importer of
// chromedp. Run under deploy/testenv (`make test`), which provides the database and
// the browser (installing Debian's chromium when root and missing); without a
// browser the tests fail rather than skip. Screenshots of the main pages land in
// screenshots/ beside this file (git-ignored).
package browsertest
