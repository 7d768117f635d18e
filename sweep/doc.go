// Package sweep is the measurement engine: it plans a stepped sweep,
// drives the generator and digitizer, extracts the response at each
// frequency, judges and re-measures points, refines the margins and
// saves the session after every point. It knows nothing of any front end:
// it publishes Events and takes commands.
package sweep
