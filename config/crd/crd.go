// Package crd embeds the CustomResourceDefinitions that controller-gen writes to bases/
// (`make manifests`), so that programs can check objects against the very schema, defaults and
// CEL rules the apiserver enforces (see api/offline) instead of a copy of them.
package crd

import "embed"

// Bases holds bases/*.yaml, one CustomResourceDefinition per file.
//
//go:embed bases/*.yaml
var Bases embed.FS
