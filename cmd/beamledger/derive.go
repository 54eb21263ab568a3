package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"

	"beamledger"
	"beamledger/provenance"
	"beamledger/provenance/optics"
)

// exitError carries the exit status of a command that has already answered in its own
// way (derive prints its error as JSON on stdout); main exits with code.
type exitError struct {
	code int
	err  error
}

func (e *exitError) Error() string { return e.err.Error() }
func (e *exitError) Unwrap() error { return e.err }

// exitBadInput is the status for input the command refuses, apart from 1 for failures
// of its own, so that scripts can tell a typo in their conditions from a broken pipe.
const exitBadInput = 2

// deriveError is the error answer of `beamledger derive`: the server's error body
// (server/errors.go), with an empty request_id since no request was made, so one
// client-side decoder reads both.
type deriveError struct {
	Error deriveErrorDetail `json:"error"`
}

type deriveErrorDetail struct {
	Code      string            `json:"code"`
	Message   string            `json:"message"`
	Fields    map[string]string `json:"fields,omitempty"`
	RequestID string            `json:"request_id"`
}

// cmdDerive reads one JSON object of operating conditions from stdin and prints the
// derived quantities, or the error body and status 2 when the input is refused.
func cmdDerive(args []string, stdin io.Reader, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("derive", flag.ContinueOnError)
	fs.SetOutput(stderr)
	settingsPath := fs.String("settings", "", "JSON file of detector-regime thresholds (optics.Settings); defaults when empty")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: beamledger derive [-settings FILE] < conditions.json")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return &exitError{exitBadInput, err}
	}
	if fs.NArg() > 0 {
		fs.Usage()
		return &exitError{exitBadInput, fmt.Errorf("derive takes no arguments, got %q", fs.Args())}
	}
	settings, err := loadSettings(*settingsPath)
	if err != nil {
		return refuse(stdout, err)
	}
	raw, err := io.ReadAll(io.LimitReader(stdin, provenance.MaxConditionsBytes+1))
	if err != nil {
		return fmt.Errorf("derive: reading standard input: %w", err)
	}
	c, err := provenance.ParseConditions(raw)
	if err != nil {
		return refuse(stdout, err)
	}
	return writeJSON(stdout, c.Derive(settings))
}

// loadSettings reads a settings file over the defaults, so a facility names only the
// thresholds it changes; unknown keys are refused, since a misspelt one would
// otherwise silently keep its default.
func loadSettings(path string) (optics.Settings, error) {
	s := optics.DefaultSettings()
	if path == "" {
		return s, nil
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return s, beamledger.InvalidField("settings", "cannot be read: "+err.Error())
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&s); err != nil {
		return s, beamledger.InvalidField("settings", "is not a settings object: "+err.Error())
	}
	if err := s.Validate(); err != nil {
		return s, beamledger.InvalidField("settings", err.Error())
	}
	return s, nil
}

// refuse prints err as the error body and returns the bad-input status.
func refuse(stdout io.Writer, err error) error {
	detail := deriveErrorDetail{Code: "invalid", Message: err.Error()}
	var be *beamledger.Error
	if errors.As(err, &be) {
		detail.Message, detail.Fields = be.Message, be.Fields
	}
	if werr := writeJSON(stdout, deriveError{detail}); werr != nil {
		return werr
	}
	return &exitError{exitBadInput, err}
}

func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false) // "≤" and "<" read better unescaped, and nothing here is HTML
	return enc.Encode(v)
}
