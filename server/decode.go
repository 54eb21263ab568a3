package server

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strings"

	"beamledger"
)

// decodeJSON reads exactly one JSON value into v, refusing unknown fields, and turns
// decoder errors into Invalid errors that name the field.
func decodeJSON(r io.Reader, v any) error {
	dec := json.NewDecoder(r)
	dec.DisallowUnknownFields()
	err := dec.Decode(v)
	if errors.Is(err, io.EOF) {
		return beamledger.Invalid("request body is empty; send a JSON object", nil)
	}
	var typeErr *json.UnmarshalTypeError
	var syntaxErr *json.SyntaxError
	var maxErr *http.MaxBytesError
	switch {
	case err == nil:
	case errors.As(err, &typeErr):
		field := typeErr.Field
		if field == "" {
			field = "body"
		}
		return beamledger.InvalidField(field, fmt.Sprintf("must be %s", jsonTypeName(typeErr.Type.Kind().String())))
	case errors.As(err, &syntaxErr):
		return beamledger.Invalid(fmt.Sprintf("request body is not valid JSON (at byte %d)", syntaxErr.Offset), nil)
	case strings.HasPrefix(err.Error(), "json: unknown field "):
		name := strings.Trim(strings.TrimPrefix(err.Error(), "json: unknown field "), `"`)
		return beamledger.InvalidField(name, "is not a field of this request")
	case errors.As(err, &maxErr):
		return &beamledger.Error{Kind: beamledger.ErrTooLarge, Message: fmt.Sprintf("request body is larger than %d bytes", maxErr.Limit)}
	default:
		return beamledger.Invalid("request body could not be read as JSON", nil)
	}
	if dec.More() {
		return beamledger.Invalid("request body must hold exactly one JSON value", nil)
	}
	return nil
}

func jsonTypeName(kind string) string {
	switch kind {
	case "string":
		return "a string"
	case "bool":
		return "true or false"
	case "slice", "array":
		return "an array"
	case "map", "struct", "ptr":
		return "an object"
	}
	return "a number"
}
