package localnode

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	corev1 "k8s.io/api/core/v1"
)

// materialize creates each volume of pod under dir/volumes/<name> and returns the container
// path to host path pairs of c's mounts (a subPath is joined to its volume's directory).
// ConfigMap and Secret volumes get one file per key (or per listed item), emptyDir a fresh
// directory, projected volumes the files of their ConfigMap and Secret sources, hostPath the
// host path itself. Contents are written once: later ConfigMap changes are not seen.
func materialize(ctx context.Context, pod *corev1.Pod, c *corev1.Container, dir string, src dataSource) (map[string]string, error) {
	hostDirs := map[string]string{}
	for _, v := range pod.Spec.Volumes {
		d := filepath.Join(dir, "volumes", v.Name)
		if v.HostPath != nil {
			hostDirs[v.Name] = v.HostPath.Path
			continue
		}
		if err := os.MkdirAll(d, 0o755); err != nil {
			return nil, err
		}
		if err := fillVolume(ctx, pod.Namespace, v, d, src); err != nil {
			return nil, fmt.Errorf("volume %s: %w", v.Name, err)
		}
		hostDirs[v.Name] = d
	}
	mounts := map[string]string{}
	for _, m := range c.VolumeMounts {
		d, ok := hostDirs[m.Name]
		if !ok {
			return nil, fmt.Errorf("volumeMount %s: no volume of that name", m.Name)
		}
		if m.SubPath != "" {
			if !filepath.IsLocal(m.SubPath) {
				return nil, fmt.Errorf("volumeMount %s: subPath %q is not a relative path inside the volume", m.Name, m.SubPath)
			}
			d = filepath.Join(d, m.SubPath)
			if err := os.MkdirAll(d, 0o755); err != nil {
				return nil, err
			}
		}
		mounts[m.MountPath] = d
	}
	return mounts, nil
}

// fillVolume writes the contents of one volume into d.
func fillVolume(ctx context.Context, ns string, v corev1.Volume, d string, src dataSource) error {
	switch {
	case v.EmptyDir != nil:
		return nil
	case v.ConfigMap != nil:
		return writeConfigMap(ctx, ns, v.ConfigMap.Name, v.ConfigMap.Items, v.ConfigMap.Optional, d, src)
	case v.Secret != nil:
		return writeSecret(ctx, ns, v.Secret.SecretName, v.Secret.Items, v.Secret.Optional, d, src)
	case v.Projected != nil:
		for _, p := range v.Projected.Sources {
			var err error
			switch {
			case p.ConfigMap != nil:
				err = writeConfigMap(ctx, ns, p.ConfigMap.Name, p.ConfigMap.Items, p.ConfigMap.Optional, d, src)
			case p.Secret != nil:
				err = writeSecret(ctx, ns, p.Secret.Name, p.Secret.Items, p.Secret.Optional, d, src)
			default:
				err = errors.New("only configMap and secret projections are supported by localnode")
			}
			if err != nil {
				return err
			}
		}
		return nil
	}
	return errors.New("volume type not supported by localnode (emptyDir, configMap, secret, projected, hostPath are)")
}

func writeConfigMap(ctx context.Context, ns, name string, items []corev1.KeyToPath, optional *bool, d string, src dataSource) error {
	data, err := src.configMap(ctx, ns, name)
	if errors.Is(err, errNotFound) && isTrue(optional) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("configMap %s: %w", name, err)
	}
	b := make(map[string][]byte, len(data))
	for k, v := range data {
		b[k] = []byte(v)
	}
	return writeKeys(b, items, d)
}

func writeSecret(ctx context.Context, ns, name string, items []corev1.KeyToPath, optional *bool, d string, src dataSource) error {
	data, err := src.secret(ctx, ns, name)
	if errors.Is(err, errNotFound) && isTrue(optional) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("secret %s: %w", name, err)
	}
	return writeKeys(data, items, d)
}

// writeKeys writes each key as a file named by the key, or only the listed items at their paths.
func writeKeys(data map[string][]byte, items []corev1.KeyToPath, d string) error {
	files := map[string][]byte{}
	if len(items) == 0 {
		for k, v := range data {
			files[k] = v
		}
	}
	for _, it := range items {
		v, ok := data[it.Key]
		if !ok {
			return fmt.Errorf("key %s: %w", it.Key, errNotFound)
		}
		files[it.Path] = v
	}
	for p, v := range files {
		if !filepath.IsLocal(p) || strings.Contains(p, "..") {
			return fmt.Errorf("path %q is not a relative path inside the volume", p)
		}
		f := filepath.Join(d, p)
		if err := os.MkdirAll(filepath.Dir(f), 0o755); err != nil {
			return err
		}
		if err := os.WriteFile(f, v, 0o644); err != nil {
			return err
		}
	}
	return nil
}
