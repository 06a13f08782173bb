package localnode

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"

	corev1 "k8s.io/api/core/v1"
)

// volumeMount is one of a container's mounts: the container path, the host path behind it and
// whether the container may only read it.
type volumeMount struct {
	path, host string
	readOnly   bool
}

// materialize creates each volume of pod under dir/volumes/<name> and returns c's mounts (a
// subPath is joined to its volume's directory). ConfigMap and Secret volumes get one file per
// key (or per listed item) with the volume's defaultMode or the item's mode, emptyDir a fresh
// directory of mode 0777 (the kubelet's emptyDir mode, from memory of its source), projected
// volumes the files of their ConfigMap and Secret sources, hostPath the host path itself. With
// the pod's fsGroup every volume the agent made is given that group as the kubelet does (see
// setVolumeOwnership). Contents are written once: later ConfigMap changes are not seen.
func materialize(ctx context.Context, pod *corev1.Pod, c *corev1.Container, dir string, src dataSource) ([]volumeMount, error) {
	hostDirs := map[string]string{}
	var fsGroup *int64
	if pod.Spec.SecurityContext != nil {
		fsGroup = pod.Spec.SecurityContext.FSGroup
	}
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
		if fsGroup != nil {
			if err := setVolumeOwnership(d, *fsGroup, v.EmptyDir == nil); err != nil {
				return nil, fmt.Errorf("volume %s: fsGroup: %w", v.Name, err)
			}
		}
		hostDirs[v.Name] = d
	}
	var mounts []volumeMount
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
		mounts = append(mounts, volumeMount{path: m.MountPath, host: d, readOnly: m.ReadOnly})
	}
	return mounts, nil
}

// setVolumeOwnership gives every file of a volume the pod's fsGroup, adds read and write for
// the group (read only for a read-only volume such as a ConfigMap), and the setgid and search
// bits to directories: the kubelet's SetVolumeOwnership (pkg/volume/volume_linux.go), from
// memory of its source.
func setVolumeOwnership(d string, fsGroup int64, readOnly bool) error {
	mask := fs.FileMode(0o660)
	if readOnly {
		mask = 0o440
	}
	return filepath.WalkDir(d, func(p string, e fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if err := os.Lchown(p, -1, int(fsGroup)); err != nil || e.Type()&fs.ModeSymlink != 0 {
			return err
		}
		info, err := e.Info()
		if err != nil {
			return err
		}
		m := mask
		if e.IsDir() {
			m |= fs.ModeSetgid | 0o110
		}
		return os.Chmod(p, info.Mode()|m)
	})
}

// fillVolume writes the contents of one volume into d.
func fillVolume(ctx context.Context, ns string, v corev1.Volume, d string, src dataSource) error {
	switch {
	case v.EmptyDir != nil:
		return os.Chmod(d, 0o777)
	case v.ConfigMap != nil:
		return writeConfigMap(ctx, ns, v.ConfigMap.Name, v.ConfigMap.Items, v.ConfigMap.Optional, fileMode(v.ConfigMap.DefaultMode), d, src)
	case v.Secret != nil:
		return writeSecret(ctx, ns, v.Secret.SecretName, v.Secret.Items, v.Secret.Optional, fileMode(v.Secret.DefaultMode), d, src)
	case v.Projected != nil:
		mode := fileMode(v.Projected.DefaultMode)
		for _, p := range v.Projected.Sources {
			var err error
			switch {
			case p.ConfigMap != nil:
				err = writeConfigMap(ctx, ns, p.ConfigMap.Name, p.ConfigMap.Items, p.ConfigMap.Optional, mode, d, src)
			case p.Secret != nil:
				err = writeSecret(ctx, ns, p.Secret.Name, p.Secret.Items, p.Secret.Optional, mode, d, src)
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

// fileMode is a volume's defaultMode, 0644 when unset (the API default of ConfigMap, Secret and
// projected volumes, k8s.io/api core/v1 ConfigMapVolumeSourceDefaultMode and its siblings).
func fileMode(m *int32) fs.FileMode {
	if m == nil {
		return 0o644
	}
	return fs.FileMode(*m) & fs.ModePerm
}

func writeConfigMap(ctx context.Context, ns, name string, items []corev1.KeyToPath, optional *bool, mode fs.FileMode, d string, src dataSource) error {
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
	return writeKeys(b, items, mode, d)
}

func writeSecret(ctx context.Context, ns, name string, items []corev1.KeyToPath, optional *bool, mode fs.FileMode, d string, src dataSource) error {
	data, err := src.secret(ctx, ns, name)
	if errors.Is(err, errNotFound) && isTrue(optional) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("secret %s: %w", name, err)
	}
	return writeKeys(data, items, mode, d)
}

// writeKeys writes each key as a file named by the key, or only the listed items at their
// paths, with mode (an item's own mode when it has one).
func writeKeys(data map[string][]byte, items []corev1.KeyToPath, mode fs.FileMode, d string) error {
	files := map[string][]byte{}
	modes := map[string]fs.FileMode{}
	if len(items) == 0 {
		for k, v := range data {
			files[k], modes[k] = v, mode
		}
	}
	for _, it := range items {
		v, ok := data[it.Key]
		if !ok {
			return fmt.Errorf("key %s: %w", it.Key, errNotFound)
		}
		files[it.Path], modes[it.Path] = v, mode
		if it.Mode != nil {
			modes[it.Path] = fileMode(it.Mode)
		}
	}
	for p, v := range files {
		if !filepath.IsLocal(p) || strings.Contains(p, "..") {
			return fmt.Errorf("path %q is not a relative path inside the volume", p)
		}
		f := filepath.Join(d, p)
		if err := os.MkdirAll(filepath.Dir(f), 0o755); err != nil {
			return err
		}
		if err := os.WriteFile(f, v, 0o600); err != nil {
			return err
		}
		if err := os.Chmod(f, modes[p]); err != nil {
			return err
		}
	}
	return nil
}
