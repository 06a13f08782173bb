package localnode

import (
	"context"
	"errors"
	"fmt"
	"sort"
	"strings"

	corev1 "k8s.io/api/core/v1"
)

// errNotFound is returned by a dataSource for a missing ConfigMap, Secret or key.
var errNotFound = errors.New("not found")

// dataSource reads ConfigMap and Secret data; a missing object returns an error wrapping
// errNotFound.
type dataSource interface {
	configMap(ctx context.Context, namespace, name string) (map[string]string, error)
	secret(ctx context.Context, namespace, name string) (map[string][]byte, error)
}

// envVar is one resolved environment variable.
type envVar struct{ name, value string }

// resolveEnv computes a container's environment the way the kubelet does: envFrom sources in
// order (each key with the source's prefix), then env entries in order, later names replacing
// earlier ones. Values may refer to variables defined before them as $(NAME); $$ escapes a
// dollar. valueFrom supports fieldRef (metadata.name, metadata.namespace, metadata.uid,
// metadata.labels['k'], metadata.annotations['k'], spec.nodeName, spec.serviceAccountName,
// status.podIP, status.hostIP), configMapKeyRef and secretKeyRef; optional references to
// missing objects or keys are skipped. The result keeps first-definition order.
func resolveEnv(ctx context.Context, pod *corev1.Pod, c *corev1.Container, src dataSource) ([]envVar, error) {
	var order []string
	vals := map[string]string{}
	set := func(k, v string) {
		if _, ok := vals[k]; !ok {
			order = append(order, k)
		}
		vals[k] = v
	}
	for _, ef := range c.EnvFrom {
		data, err := envFromData(ctx, pod.Namespace, ef, src)
		if err != nil {
			return nil, err
		}
		keys := make([]string, 0, len(data))
		for k := range data {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		for _, k := range keys {
			set(ef.Prefix+k, data[k])
		}
	}
	for _, e := range c.Env {
		if e.ValueFrom == nil {
			set(e.Name, expand(e.Value, vals))
			continue
		}
		v, ok, err := envValueFrom(ctx, pod, e.ValueFrom, src)
		if err != nil {
			return nil, fmt.Errorf("env %s: %w", e.Name, err)
		}
		if ok {
			set(e.Name, v)
		}
	}
	out := make([]envVar, len(order))
	for i, k := range order {
		out[i] = envVar{k, vals[k]}
	}
	return out, nil
}

// envFromData returns the key/value pairs of one envFrom source; a missing optional source
// gives none.
func envFromData(ctx context.Context, ns string, ef corev1.EnvFromSource, src dataSource) (map[string]string, error) {
	switch {
	case ef.ConfigMapRef != nil:
		d, err := src.configMap(ctx, ns, ef.ConfigMapRef.Name)
		if errors.Is(err, errNotFound) && isTrue(ef.ConfigMapRef.Optional) {
			return nil, nil
		}
		if err != nil {
			return nil, fmt.Errorf("envFrom configMap %s: %w", ef.ConfigMapRef.Name, err)
		}
		return d, nil
	case ef.SecretRef != nil:
		d, err := src.secret(ctx, ns, ef.SecretRef.Name)
		if errors.Is(err, errNotFound) && isTrue(ef.SecretRef.Optional) {
			return nil, nil
		}
		if err != nil {
			return nil, fmt.Errorf("envFrom secret %s: %w", ef.SecretRef.Name, err)
		}
		out := make(map[string]string, len(d))
		for k, v := range d {
			out[k] = string(v)
		}
		return out, nil
	}
	return nil, errors.New("envFrom: neither configMapRef nor secretRef")
}

// envValueFrom resolves one valueFrom; ok is false for a missing optional reference.
func envValueFrom(ctx context.Context, pod *corev1.Pod, vf *corev1.EnvVarSource, src dataSource) (string, bool, error) {
	switch {
	case vf.FieldRef != nil:
		v, err := fieldValue(pod, vf.FieldRef.FieldPath)
		return v, err == nil, err
	case vf.ConfigMapKeyRef != nil:
		r := vf.ConfigMapKeyRef
		d, err := src.configMap(ctx, pod.Namespace, r.Name)
		if err == nil {
			if v, ok := d[r.Key]; ok {
				return v, true, nil
			}
			err = fmt.Errorf("key %s in configMap %s: %w", r.Key, r.Name, errNotFound)
		}
		if errors.Is(err, errNotFound) && isTrue(r.Optional) {
			return "", false, nil
		}
		return "", false, err
	case vf.SecretKeyRef != nil:
		r := vf.SecretKeyRef
		d, err := src.secret(ctx, pod.Namespace, r.Name)
		if err == nil {
			if v, ok := d[r.Key]; ok {
				return string(v), true, nil
			}
			err = fmt.Errorf("key %s in secret %s: %w", r.Key, r.Name, errNotFound)
		}
		if errors.Is(err, errNotFound) && isTrue(r.Optional) {
			return "", false, nil
		}
		return "", false, err
	}
	return "", false, errors.New("valueFrom: only fieldRef, configMapKeyRef and secretKeyRef are supported")
}

// fieldValue returns the value of a downward-API field path of pod.
func fieldValue(pod *corev1.Pod, path string) (string, error) {
	if k, ok := subscript(path, "metadata.labels"); ok {
		return pod.Labels[k], nil
	}
	if k, ok := subscript(path, "metadata.annotations"); ok {
		return pod.Annotations[k], nil
	}
	switch path {
	case "metadata.name":
		return pod.Name, nil
	case "metadata.namespace":
		return pod.Namespace, nil
	case "metadata.uid":
		return string(pod.UID), nil
	case "spec.nodeName":
		return pod.Spec.NodeName, nil
	case "spec.serviceAccountName":
		return pod.Spec.ServiceAccountName, nil
	case "status.podIP", "status.hostIP":
		return loopback, nil
	}
	return "", fmt.Errorf("fieldRef %q is not supported", path)
}

// subscript parses prefix['key'] and returns key.
func subscript(path, prefix string) (string, bool) {
	rest, ok := strings.CutPrefix(path, prefix+"['")
	if !ok || !strings.HasSuffix(rest, "']") {
		return "", false
	}
	return strings.TrimSuffix(rest, "']"), true
}

// expand replaces $(NAME) by vals[NAME] when NAME is defined, keeps unknown references as they
// are, and turns $$ into $, following the Kubernetes rules for env values, command and args.
func expand(s string, vals map[string]string) string {
	if !strings.Contains(s, "$") {
		return s
	}
	var b strings.Builder
	for i := 0; i < len(s); i++ {
		if s[i] != '$' || i+1 == len(s) {
			b.WriteByte(s[i])
			continue
		}
		switch s[i+1] {
		case '$':
			b.WriteByte('$')
			i++
		case '(':
			end := strings.IndexByte(s[i+2:], ')')
			if end < 0 {
				b.WriteString(s[i:])
				return b.String()
			}
			name := s[i+2 : i+2+end]
			if v, ok := vals[name]; ok {
				b.WriteString(v)
			} else {
				b.WriteString(s[i : i+3+end])
			}
			i += 2 + end
		default:
			b.WriteByte('$')
		}
	}
	return b.String()
}

func isTrue(p *bool) bool { return p != nil && *p }
