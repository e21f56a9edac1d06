package alerts

import _ "embed"

//go:embed record.schema.json
var recordSchema []byte

// Schema returns the JSON Schema (draft 2020-12) of Record, a fresh copy.
func Schema() []byte { return append([]byte(nil), recordSchema...) }
