// Package offline checks ForecastPortfolio and ForecastRun manifests without a cluster, with the
// schema, defaults and CEL rules of the generated CRDs (config/crd/bases, embedded by
// config/crd) run by the apiextensions-apiserver libraries the apiserver itself uses. No rule is
// copied here: a rule added to the API types reaches this package through `make manifests`.
//
// For each object, Load does what kube-apiserver v1.37 does when the object is created with
// fieldValidation=Strict (kubectl's default; k8s.io/apiextensions-apiserver
// pkg/apiserver/customresource_handler.go and pkg/registry/customresource/strategy.go):
//
//  1. decode: YAML to JSON, refusing duplicate keys; integers stay integers;
//  2. prune: fields the schema does not declare are refused by path ("spec.foo", also inside
//     metadata), as Strict field validation refuses them (without Strict the apiserver would
//     drop them silently); nulls of non-nullable fields without a default are dropped;
//  3. default: the schema's defaults are applied (structural defaulting);
//  4. create: status is dropped (both kinds have a status subresource), then apiVersion/kind,
//     metadata (name a DNS subdomain, namespace a DNS label, labels, annotations...), the OpenAPI
//     schema (types, enums, bounds, patterns, formats), x-kubernetes-list-type invariants and, if
//     none of those refused a value the rules could not evaluate, the x-kubernetes-validations CEL
//     rules with the apiserver's per-call and per-object cost limits.
//
// Every refusal is a field.Error naming the field path (spec.schedule, spec.models[0].family).
// Unlike the apiserver, which stops at the first unknown field, Load goes on to validate what the
// schema knows, so one pass lists every bad field.
//
// Differences left on purpose: admission webhooks and policies are not run (the install has
// none); a manifest without metadata.namespace is checked as if created in namespace "default"
// and keeps an empty namespace; a generateName is checked with a generated suffix and the object
// keeps an empty name; update-only rules (transition rules, immutability) do not apply to a
// manifest on its own.
package offline

import (
	"bytes"
	"cmp"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"strconv"
	"strings"
	"sync"

	yamlv3 "go.yaml.in/yaml/v3"
	apiextensionsinternal "k8s.io/apiextensions-apiserver/pkg/apis/apiextensions"
	apiextensionsv1 "k8s.io/apiextensions-apiserver/pkg/apis/apiextensions/v1"
	structuralschema "k8s.io/apiextensions-apiserver/pkg/apiserver/schema"
	"k8s.io/apiextensions-apiserver/pkg/apiserver/schema/cel"
	structuraldefaulting "k8s.io/apiextensions-apiserver/pkg/apiserver/schema/defaulting"
	structurallisttype "k8s.io/apiextensions-apiserver/pkg/apiserver/schema/listtype"
	schemaobjectmeta "k8s.io/apiextensions-apiserver/pkg/apiserver/schema/objectmeta"
	structuralpruning "k8s.io/apiextensions-apiserver/pkg/apiserver/schema/pruning"
	apiservervalidation "k8s.io/apiextensions-apiserver/pkg/apiserver/validation"
	metavalidation "k8s.io/apimachinery/pkg/api/validation"
	"k8s.io/apimachinery/pkg/api/validation/path"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/runtime/schema"
	utiljson "k8s.io/apimachinery/pkg/util/json"
	"k8s.io/apimachinery/pkg/util/validation/field"
	celconfig "k8s.io/apiserver/pkg/apis/cel"
	"k8s.io/apiserver/pkg/storage/names"
	"sigs.k8s.io/yaml"

	"almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/config/crd"
)

// Object is one document of a manifest file, pruned, defaulted and valid. Exactly one of
// Portfolio and Run is set.
type Object struct {
	// Document is the document's position in the file, from 1; Line the file line it starts on.
	Document, Line int
	Portfolio      *v1alpha1.ForecastPortfolio
	Run            *v1alpha1.ForecastRun
}

// Kind is ForecastPortfolio or ForecastRun.
func (o Object) Kind() string {
	if o.Portfolio != nil {
		return "ForecastPortfolio"
	}
	return "ForecastRun"
}

// Name is the object's metadata.name (empty when the manifest only has a generateName).
func (o Object) Name() string {
	if o.Portfolio != nil {
		return o.Portfolio.Name
	}
	return o.Run.Name
}

// DocumentError is one document the apiserver would refuse.
type DocumentError struct {
	File           string
	Document, Line int
	// Kind and Name as written, where they could be read.
	Kind, Name string
	// Fields lists every refused field, each with its path.
	Fields field.ErrorList
	// FieldLines[i] is the file line of Fields[i]: the line of the deepest node of its path
	// that the document has (the field itself, or the object it is missing from); 0 where
	// unknown, which the message shows as Line.
	FieldLines []int
	// Err is set instead of Fields when the document could not be decoded at all.
	Err error
}

// Error gives one line per refused field: FILE:LINE: KIND "NAME": PATH: REASON, with LINE the
// field's own line where it is known (FieldLines), else the document's.
func (e *DocumentError) Error() string {
	at := func(line int) string {
		prefix := fmt.Sprintf("%s:%d: ", e.File, cmp.Or(line, e.Line))
		if e.Kind != "" {
			prefix += e.Kind + " "
		}
		if e.Name != "" {
			prefix += fmt.Sprintf("%q ", e.Name)
		}
		return prefix
	}
	prefix := at(0)
	if e.Err != nil {
		return prefix + e.Err.Error()
	}
	lines := make([]string, len(e.Fields))
	for i, f := range e.Fields {
		if i < len(e.FieldLines) {
			prefix = at(e.FieldLines[i])
		}
		if f.Field == "" || f.Field == "<nil>" {
			// An error about the whole object (the CEL rules left unchecked) has no path.
			lines[i] = prefix + f.Detail
			continue
		}
		lines[i] = prefix + f.Error()
	}
	return strings.Join(lines, "\n")
}

// Unwrap gives the decoding error, if any.
func (e *DocumentError) Unwrap() error { return e.Err }

// Error is what Load returns when a file holds no object or at least one document was refused.
type Error struct {
	File string
	// Documents are the refused documents in file order (empty when the file holds no object).
	Documents []*DocumentError
}

func (e *Error) Error() string {
	if len(e.Documents) == 0 {
		return e.File + ": no ForecastPortfolio or ForecastRun in the file"
	}
	lines := make([]string, len(e.Documents))
	for i, d := range e.Documents {
		lines[i] = d.Error()
	}
	return strings.Join(lines, "\n")
}

// Fields gives every refused field of every document.
func (e *Error) Fields() field.ErrorList {
	var out field.ErrorList
	for _, d := range e.Documents {
		out = append(out, d.Fields...)
	}
	return out
}

// LoadFile reads a manifest file and checks it with Load.
func LoadFile(file string) ([]Object, error) {
	data, err := os.ReadFile(file)
	if err != nil {
		return nil, err
	}
	return Load(file, data)
}

// LoadPortfolio reads a manifest file that holds exactly one ForecastPortfolio (ForecastRuns
// beside it are checked too, then ignored) and returns it with the CRD defaults applied.
func LoadPortfolio(file string) (*v1alpha1.ForecastPortfolio, error) {
	objs, err := LoadFile(file)
	if err != nil {
		return nil, err
	}
	var found []*v1alpha1.ForecastPortfolio
	for _, o := range objs {
		if o.Portfolio != nil {
			found = append(found, o.Portfolio)
		}
	}
	if len(found) != 1 {
		return nil, fmt.Errorf("%s: want exactly one ForecastPortfolio, the file holds %d", file, len(found))
	}
	return found[0], nil
}

// Load checks every document of a YAML or JSON manifest (documents separated by --- lines;
// empty documents are skipped, as kubectl skips them). file names the input in messages. It
// returns the valid objects in file order and, when a document was refused or the file holds no
// object, an *Error listing every refused field of every document.
func Load(file string, data []byte) ([]Object, error) {
	kinds, err := loadKinds()
	if err != nil {
		return nil, fmt.Errorf("loading the embedded CRDs: %w", err)
	}
	var objs []Object
	refused := &Error{File: file}
	for i, doc := range splitDocuments(data) {
		obj, derr := kinds.check(doc.text)
		if derr != nil {
			derr.File, derr.Document, derr.Line = file, i+1, doc.line
			derr.FieldLines = fieldLines(doc, derr.Fields)
			refused.Documents = append(refused.Documents, derr)
			continue
		}
		if obj == nil {
			continue
		}
		obj.Document, obj.Line = i+1, doc.line
		objs = append(objs, *obj)
	}
	if len(refused.Documents) > 0 || len(objs) == 0 {
		return objs, refused
	}
	return objs, nil
}

type document struct {
	text []byte
	line int // first line that is neither blank nor a comment
	from int // file line of text's first line
}

// splitDocuments cuts YAML at lines that start a new document ("---", optionally followed by a
// space and a comment). A document's line is its first line that is neither blank nor a comment.
func splitDocuments(data []byte) []document {
	var docs []document
	cur := document{from: 1}
	lineNo := 0
	for len(data) > 0 {
		var line []byte
		if i := bytes.IndexByte(data, '\n'); i >= 0 {
			line, data = data[:i+1], data[i+1:]
		} else {
			line, data = data, nil
		}
		lineNo++
		trimmed := bytes.TrimRight(line, " \t\r\n")
		if bytes.Equal(trimmed, []byte("---")) || bytes.HasPrefix(trimmed, []byte("--- ")) {
			docs = append(docs, cur)
			cur = document{from: lineNo + 1}
			continue
		}
		if content := bytes.TrimLeft(trimmed, " \t"); cur.line == 0 && len(content) > 0 && content[0] != '#' {
			cur.line = lineNo
		}
		cur.text = append(cur.text, line...)
	}
	return append(docs, cur)
}

// fieldLines finds the file line of each refused field in the document's YAML: the line of the
// deepest node along the field's path ("spec.models[2].seasonalPeriods[0]") that the document
// has, so a missing required field points at the object it is missing from. 0 where the path
// is empty or the document does not parse as YAML nodes.
func fieldLines(doc document, errs field.ErrorList) []int {
	var root yamlv3.Node
	if len(errs) == 0 || yamlv3.Unmarshal(doc.text, &root) != nil || len(root.Content) == 0 {
		return nil
	}
	out := make([]int, len(errs))
	for i, e := range errs {
		if e.Field == "" || e.Field == "<nil>" {
			continue
		}
		out[i] = doc.from + deepestLine(root.Content[0], pathSteps(e.Field)) - 1
	}
	return out
}

// pathSteps splits a field path into map keys and list indices: "a.b[2].c" gives a, b, [2], c;
// a bracketed step that is not a number is a map key (field.Path writes map keys so).
func pathSteps(p string) []string {
	var steps []string
	for _, part := range strings.Split(p, ".") {
		for part != "" {
			i := strings.IndexByte(part, '[')
			if i < 0 {
				steps = append(steps, part)
				break
			}
			if i > 0 {
				steps = append(steps, part[:i])
			}
			j := strings.IndexByte(part[i:], ']')
			if j < 0 {
				steps = append(steps, part[i:])
				break
			}
			steps = append(steps, part[i:i+j+1])
			part = part[i+j+1:]
		}
	}
	return steps
}

// deepestLine walks steps from n and returns the line of the last step it reaches: a map key's
// own line (for a nested object, the line of "key:", not of its first field), a list element's
// line, or n's line when the first step is missing.
func deepestLine(n *yamlv3.Node, steps []string) int {
	line := n.Line
	for _, st := range steps {
		key, next := child(n, st)
		if next == nil {
			break
		}
		line, n = next.Line, next
		if key != nil {
			line = key.Line
		}
	}
	return line
}

// child is n's value under map key st (with the key node), or its element st = "[i]" (key nil);
// nil when there is none.
func child(n *yamlv3.Node, st string) (key, value *yamlv3.Node) {
	if n.Kind == yamlv3.AliasNode {
		n = n.Alias
	}
	name := st
	if strings.HasPrefix(st, "[") && strings.HasSuffix(st, "]") {
		name = strings.Trim(st[1:len(st)-1], `"`)
		if i, err := strconv.Atoi(name); err == nil && n.Kind == yamlv3.SequenceNode {
			if i >= 0 && i < len(n.Content) {
				return nil, n.Content[i]
			}
			return nil, nil
		}
	}
	if n.Kind != yamlv3.MappingNode {
		return nil, nil
	}
	for k := 0; k+1 < len(n.Content); k += 2 {
		if n.Content[k].Value == name {
			return n.Content[k], n.Content[k+1]
		}
	}
	return nil, nil
}

// kindSchema is what the apiserver builds for one served version of a CRD.
type kindSchema struct {
	gvk        schema.GroupVersionKind
	namespaced bool
	hasStatus  bool
	structural *structuralschema.Structural
	validator  apiservervalidation.SchemaValidator
	cel        *cel.Validator // nil when the schema has no x-kubernetes-validations
}

type kindSet map[schema.GroupVersionKind]*kindSchema

var loadKinds = sync.OnceValues(func() (kindSet, error) { return newKindSet(crd.Bases) })

// newKindSet builds the schemas of every served version of the CRDs in fsys, as the apiserver
// does when it starts serving a CRD (customresource_handler.go, getOrCreateServingInfoFor).
func newKindSet(fsys fs.FS) (kindSet, error) {
	files, err := fs.Glob(fsys, "bases/*.yaml")
	if err != nil {
		return nil, err
	}
	kinds := kindSet{}
	for _, f := range files {
		b, err := fs.ReadFile(fsys, f)
		if err != nil {
			return nil, err
		}
		var def apiextensionsv1.CustomResourceDefinition
		if err := yaml.UnmarshalStrict(b, &def); err != nil {
			return nil, fmt.Errorf("%s: %w", f, err)
		}
		for _, v := range def.Spec.Versions {
			if !v.Served || v.Schema == nil {
				continue
			}
			var internal apiextensionsinternal.CustomResourceValidation
			if err := apiextensionsv1.Convert_v1_CustomResourceValidation_To_apiextensions_CustomResourceValidation(v.Schema, &internal, nil); err != nil {
				return nil, fmt.Errorf("%s %s: %w", f, v.Name, err)
			}
			s, err := structuralschema.NewStructural(internal.OpenAPIV3Schema)
			if err != nil {
				return nil, fmt.Errorf("%s %s: not a structural schema: %w", f, v.Name, err)
			}
			s = s.DeepCopy()
			if err := structuraldefaulting.PruneDefaults(s); err != nil {
				return nil, fmt.Errorf("%s %s: %w", f, v.Name, err)
			}
			validator, _, err := apiservervalidation.NewSchemaValidator(internal.OpenAPIV3Schema)
			if err != nil {
				return nil, fmt.Errorf("%s %s: %w", f, v.Name, err)
			}
			gvk := schema.GroupVersionKind{Group: def.Spec.Group, Version: v.Name, Kind: def.Spec.Names.Kind}
			kinds[gvk] = &kindSchema{
				gvk:        gvk,
				namespaced: def.Spec.Scope == apiextensionsv1.NamespaceScoped,
				hasStatus:  v.Subresources != nil && v.Subresources.Status != nil,
				structural: s,
				validator:  validator,
				cel:        cel.NewValidator(s, true, celconfig.PerCallLimit),
			}
		}
	}
	return kinds, nil
}

// PortfolioSchema returns the structural schema of the served ForecastPortfolio version, as
// read from the embedded CRD (defaults pruned as the apiserver prunes them).
func PortfolioSchema() (*structuralschema.Structural, error) {
	ks, err := portfolioKind()
	if err != nil {
		return nil, err
	}
	return ks.structural, nil
}

// DefaultPortfolio applies the CRD's schema defaults to fp in place, as the apiserver does to an
// object it stores, and returns fp. It does not validate: it is for objects built in Go (test
// fixtures) before they go through render; files go through Load.
func DefaultPortfolio(fp *v1alpha1.ForecastPortfolio) (*v1alpha1.ForecastPortfolio, error) {
	ks, err := portfolioKind()
	if err != nil {
		return nil, err
	}
	u, err := runtime.DefaultUnstructuredConverter.ToUnstructured(fp)
	if err != nil {
		return nil, err
	}
	structuraldefaulting.Default(u, ks.structural)
	var out v1alpha1.ForecastPortfolio
	if err := runtime.DefaultUnstructuredConverter.FromUnstructured(u, &out); err != nil {
		return nil, err
	}
	*fp = out
	return fp, nil
}

func portfolioKind() (*kindSchema, error) {
	kinds, err := loadKinds()
	if err != nil {
		return nil, fmt.Errorf("loading the embedded CRDs: %w", err)
	}
	ks := kinds[v1alpha1.GroupVersion.WithKind("ForecastPortfolio")]
	if ks == nil {
		return nil, errors.New("the embedded CRDs serve no ForecastPortfolio " + v1alpha1.GroupVersion.String())
	}
	return ks, nil
}

// check decodes and checks one document; it returns nil, nil for an empty document.
func (kinds kindSet) check(text []byte) (*Object, *DocumentError) {
	j, err := yaml.YAMLToJSONStrict(text)
	if err != nil {
		return nil, &DocumentError{Err: fmt.Errorf("not valid YAML: %w", err)}
	}
	if t := bytes.TrimSpace(j); len(t) == 0 || bytes.Equal(t, []byte("null")) {
		return nil, nil
	}
	var content map[string]any
	if err := utiljson.Unmarshal(j, &content); err != nil {
		return nil, &DocumentError{Err: fmt.Errorf("not an object: %w", err)}
	}
	u := &unstructured.Unstructured{Object: content}
	derr := &DocumentError{Kind: u.GetKind(), Name: u.GetName()}
	if derr.Name == "" {
		// Not a string, or absent: read the raw value for the message.
		if m, ok := content["metadata"].(map[string]any); ok {
			if n, ok := m["name"].(string); ok {
				derr.Name = n
			}
		}
	}
	gv, err := schema.ParseGroupVersion(u.GetAPIVersion())
	if err != nil {
		derr.Fields = field.ErrorList{field.Invalid(field.NewPath("apiVersion"), u.GetAPIVersion(), err.Error())}
		return nil, derr
	}
	ks := kinds[gv.WithKind(u.GetKind())]
	if ks == nil {
		derr.Fields = kinds.unknownKind(u)
		return nil, derr
	}
	errs := ks.coerce(u)
	errs = append(errs, ks.validateCreate(u)...)
	if len(errs) > 0 {
		derr.Fields = errs
		return nil, derr
	}
	return typed(u)
}

// unknownKind says which of apiVersion and kind is not served.
func (kinds kindSet) unknownKind(u *unstructured.Unstructured) field.ErrorList {
	var knownKinds, knownVersions []string
	kindKnown := false
	for gvk := range kinds {
		knownKinds = append(knownKinds, gvk.Kind)
		knownVersions = append(knownVersions, gvk.GroupVersion().String())
		kindKnown = kindKnown || gvk.Kind == u.GetKind()
	}
	if !kindKnown {
		return field.ErrorList{field.NotSupported(field.NewPath("kind"), u.GetKind(), knownKinds)}
	}
	return field.ErrorList{field.NotSupported(field.NewPath("apiVersion"), u.GetAPIVersion(), knownVersions)}
}

// coerce is the apiserver's decoding step for a custom resource with fieldValidation=Strict
// (unstructuredSchemaCoercer.apply, then unstructuredDefaulter): it prunes and reports unknown
// fields, drops non-nullable nulls and applies the defaults.
func (ks *kindSchema) coerce(u *unstructured.Unstructured) field.ErrorList {
	var errs field.ErrorList
	unknown := func(paths []string) {
		for _, p := range paths {
			errs = append(errs, field.Forbidden(field.NewPath(p), "unknown field: the "+ks.gvk.Kind+" schema has no such field"))
		}
	}
	kind, apiVersion := u.GetKind(), u.GetAPIVersion()
	objectMeta, foundMeta, metaUnknown, err := schemaobjectmeta.GetObjectMetaWithOptions(u.Object, schemaobjectmeta.ObjectMetaOptions{ReturnUnknownFieldPaths: true})
	if err != nil {
		return field.ErrorList{field.Invalid(field.NewPath("metadata"), u.Object["metadata"], err.Error())}
	}
	unknown(metaUnknown)
	unknown(structuralpruning.PruneWithOptions(u.Object, ks.structural, true, structuralschema.UnknownFieldPathOptions{TrackUnknownFieldPaths: true}))
	structuraldefaulting.PruneNonNullableNullsWithoutDefaults(u.Object, ks.structural)
	ferr, metaPaths := schemaobjectmeta.CoerceWithOptions(nil, u.Object, ks.structural, false, schemaobjectmeta.CoerceOptions{ReturnUnknownFieldPaths: true})
	if ferr != nil {
		errs = append(errs, ferr)
	}
	unknown(metaPaths)
	u.SetKind(kind)
	u.SetAPIVersion(apiVersion)
	if foundMeta {
		if err := schemaobjectmeta.SetObjectMeta(u.Object, objectMeta); err != nil {
			errs = append(errs, field.Invalid(field.NewPath("metadata"), nil, err.Error()))
		}
	}
	structuraldefaulting.Default(u.Object, ks.structural)
	return errs
}

// validateCreate is rest.BeforeCreate with the custom resource strategy
// (customResourceStrategy.PrepareForCreate and Validate, then rest.ValidateCreate's generic
// metadata check). u itself only loses its status; name and namespace are filled in on a copy.
func (ks *kindSchema) validateCreate(u *unstructured.Unstructured) field.ErrorList {
	if ks.hasStatus {
		delete(u.Object, "status")
	}
	c := u.DeepCopy()
	if c.GetName() == "" && c.GetGenerateName() != "" {
		c.SetName(names.SimpleNameGenerator.GenerateName(c.GetGenerateName()))
	}
	if ks.namespaced && c.GetNamespace() == "" {
		c.SetNamespace(metav1.NamespaceDefault)
	}
	c.SetGeneration(1)

	ctx := context.Background()
	var errs field.ErrorList
	// customResourceValidator.Validate: type meta first, alone.
	if c.GetKind() != ks.gvk.Kind {
		errs = append(errs, field.Invalid(field.NewPath("kind"), c.GetKind(), "must be "+ks.gvk.Kind))
	}
	if want := ks.gvk.GroupVersion().String(); c.GetAPIVersion() != want {
		errs = append(errs, field.Invalid(field.NewPath("apiVersion"), c.GetAPIVersion(), "must be "+want))
	}
	if len(errs) > 0 {
		return errs
	}
	meta, err := metaOf(c)
	if err != nil {
		return field.ErrorList{field.Invalid(field.NewPath("metadata"), c.Object["metadata"], err.Error())}
	}
	errs = append(errs, metavalidation.ValidateObjectMeta(meta, ks.namespaced, metavalidation.NameIsDNSSubdomain, field.NewPath("metadata"))...)
	errs = append(errs, apiservervalidation.ValidateCustomResource(nil, c.Object, ks.validator)...)
	// customResourceStrategy.Validate: embedded resources, list types, then the CEL rules unless a
	// refused value would keep them from being evaluated.
	errs = append(errs, schemaobjectmeta.Validate(ctx, nil, c.Object, ks.structural, false)...)
	errs = append(errs, structurallisttype.ValidateListSetsAndMaps(nil, ks.structural, c.Object)...)
	if ks.cel != nil {
		if blocking := blockingError(errs); blocking != nil {
			errs = append(errs, blocking)
		} else {
			celErrs, _ := ks.cel.Validate(ctx, nil, ks.structural, c.Object, nil, celconfig.RuntimeCELCostBudget)
			errs = append(errs, celErrs...)
		}
	}
	if len(errs) == 0 {
		// rest.ValidateCreate: the generic metadata check after the strategy's.
		errs = metavalidation.ValidateObjectMetaAccessor(meta, ks.namespaced, path.ValidatePathSegmentName, field.NewPath("metadata"))
	}
	return errs
}

// blockingError is customResourceStrategy's hasBlockingErr: after these error types the CEL
// rules are not evaluated, and the object is refused with one more error saying so.
func blockingError(errs field.ErrorList) *field.Error {
	for _, e := range errs {
		switch e.Type {
		case field.ErrorTypeNotSupported, field.ErrorTypeRequired, field.ErrorTypeTooLong, field.ErrorTypeTooMany, field.ErrorTypeTypeInvalid:
			return field.Invalid(nil, nil, "some validation rules were not checked because the object was invalid; correct the existing errors to complete validation")
		}
	}
	return nil
}

func metaOf(u *unstructured.Unstructured) (*metav1.ObjectMeta, error) {
	meta := &metav1.ObjectMeta{}
	m, ok := u.Object["metadata"].(map[string]any)
	if !ok {
		return meta, nil
	}
	if err := runtime.DefaultUnstructuredConverter.FromUnstructured(m, meta); err != nil {
		return nil, err
	}
	return meta, nil
}

// typed converts a valid object to its Go type. The conversion refuses fields the Go type lacks,
// so a CRD out of step with the types (`make manifests` not run) shows up here.
func typed(u *unstructured.Unstructured) (*Object, *DocumentError) {
	var obj Object
	var into runtime.Object
	switch u.GetKind() {
	case "ForecastPortfolio":
		obj.Portfolio = &v1alpha1.ForecastPortfolio{}
		into = obj.Portfolio
	case "ForecastRun":
		obj.Run = &v1alpha1.ForecastRun{}
		into = obj.Run
	default:
		return nil, &DocumentError{Kind: u.GetKind(), Name: u.GetName(), Err: errors.New("the CRDs serve a kind this package has no Go type for")}
	}
	if err := runtime.DefaultUnstructuredConverter.FromUnstructuredWithValidation(u.Object, into, true); err != nil {
		return nil, &DocumentError{Kind: u.GetKind(), Name: u.GetName(),
			Err: fmt.Errorf("the embedded CRD and the Go types disagree (run `make manifests`): %w", err)}
	}
	return &obj, nil
}
