package localnode

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sync"
	"time"

	"github.com/go-logr/logr"
	coordinationv1 "k8s.io/api/coordination/v1"
	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/resource"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/client-go/informers"
	"k8s.io/client-go/kubernetes"
	"k8s.io/client-go/tools/cache"
	"k8s.io/client-go/util/workqueue"

	"almanac.dev/almanac/test/sandbox"
)

// NodeSpec describes one Node the agent registers.
type NodeSpec struct {
	// Name is the Node's name.
	Name string
	// Labels are added to the Node (kubernetes.io/hostname is always set to Name).
	Labels map[string]string
	// Taints are set on the Node; none by default.
	Taints []corev1.Taint
}

// Options configure an Agent.
type Options struct {
	// Client talks to the API server.
	Client kubernetes.Interface
	// Nodes are the Nodes the agent registers and runs pods for; at least one.
	Nodes []NodeSpec
	// Images maps an image reference, exactly as written in the pod spec, to the host binary
	// that stands for the image's entrypoint.
	Images map[string]string
	// Sandboxed maps an image reference to an unpacked image (test/sandbox). A pod naming one
	// runs the image's own program inside the image's root, as its security context says
	// (sandboxed.go), instead of a host binary; it takes precedence over Images. Needs root.
	Sandboxed map[string]*sandbox.Image
	// SharedDirs are host directories bound read-write at their own paths into every sandbox:
	// the storage every node reaches (file:// URIs in tests). They must exist.
	SharedDirs []string
	// Dir holds one directory per pod (volumes, termination message, log, working directory,
	// a sandbox's root tree). It must be on the file system of the Sandboxed images' roots,
	// whose files each pod's tree links.
	Dir string
	// MaxPodsPerNode caps the unfinished pods bound to one node (0: 110, the kubelet's default
	// maxPods, from memory).
	MaxPodsPerNode int
	// Log receives the agent's log lines; discarded when unset.
	Log logr.Logger
}

// Agent plays the kubelet and the scheduler for its Nodes.
type Agent struct {
	opts  Options
	pods  cache.Indexer
	queue workqueue.TypedRateLimitingInterface[string]
	log   logr.Logger

	mu   sync.Mutex
	runs map[string]*podRun // by namespace/name
	// deleted holds the pods the agent already removed with grace 0 (their finalizers may keep
	// them a little longer).
	deleted map[types.UID]bool
	wg      sync.WaitGroup
	// logPort serves the pods' container logs (logs.go).
	logPort int32
}

// New checks the options and returns an agent; Run starts it.
func New(opts Options) (*Agent, error) {
	if opts.Client == nil || len(opts.Nodes) == 0 || opts.Dir == "" {
		return nil, errors.New("localnode: Client, Nodes and Dir are required")
	}
	for _, n := range opts.Nodes {
		if n.Name == "" {
			return nil, errors.New("localnode: a node has no name")
		}
	}
	if len(opts.Sandboxed) > 0 {
		if err := sandbox.Available(); err != nil {
			return nil, fmt.Errorf("localnode: Sandboxed images: %w", err)
		}
	}
	for _, d := range opts.SharedDirs {
		if st, err := os.Stat(d); err != nil || !st.IsDir() || !filepath.IsAbs(d) {
			return nil, fmt.Errorf("localnode: shared directory %q is not an existing absolute directory", d)
		}
	}
	if opts.MaxPodsPerNode == 0 {
		opts.MaxPodsPerNode = 110
	}
	if opts.Log.GetSink() == nil {
		opts.Log = logr.Discard()
	}
	return &Agent{opts: opts, log: opts.Log, runs: map[string]*podRun{}, deleted: map[types.UID]bool{}}, nil
}

// Run registers the Nodes, keeps their Leases and Ready condition fresh, binds pending pods and
// runs the pods bound to its Nodes until ctx ends; then it kills every process it started (all
// of its process group) and returns once they are gone.
func (a *Agent) Run(ctx context.Context) error {
	port, err := a.serveLogs(ctx)
	if err != nil {
		return fmt.Errorf("localnode: serve container logs: %w", err)
	}
	a.logPort = int32(port)
	for _, n := range a.opts.Nodes {
		if err := a.register(ctx, n); err != nil {
			return fmt.Errorf("localnode: register node %s: %w", n.Name, err)
		}
	}
	factory := informers.NewSharedInformerFactory(a.opts.Client, 0)
	inf := factory.Core().V1().Pods().Informer()
	a.pods = inf.GetIndexer()
	a.queue = workqueue.NewTypedRateLimitingQueue(workqueue.DefaultTypedControllerRateLimiter[string]())
	enqueue := func(obj any) {
		if key, err := cache.DeletionHandlingMetaNamespaceKeyFunc(obj); err == nil {
			a.queue.Add(key)
		}
	}
	if _, err := inf.AddEventHandler(cache.ResourceEventHandlerFuncs{
		AddFunc:    enqueue,
		UpdateFunc: func(_, obj any) { enqueue(obj) },
		DeleteFunc: enqueue,
	}); err != nil {
		return err
	}
	factory.Start(ctx.Done())
	if !cache.WaitForCacheSync(ctx.Done(), inf.HasSynced) {
		a.queue.ShutDown()
		return ctx.Err()
	}
	go a.heartbeat(ctx)
	var workers sync.WaitGroup
	for range 4 {
		workers.Go(func() {
			for a.next(ctx) {
			}
		})
	}
	<-ctx.Done()
	a.queue.ShutDown()
	workers.Wait()
	factory.Shutdown()
	a.wg.Wait() // each run kills its process group when ctx ends
	return nil
}

// next handles one queued pod key; false once the queue shuts down.
func (a *Agent) next(ctx context.Context) bool {
	key, quit := a.queue.Get()
	if quit {
		return false
	}
	defer a.queue.Done(key)
	retry, err := a.sync(ctx, key)
	switch {
	case err != nil && ctx.Err() == nil:
		a.log.Error(err, "sync pod", "pod", key)
		a.queue.AddRateLimited(key)
	case retry > 0:
		a.queue.Forget(key)
		a.queue.AddAfter(key, retry)
	default:
		a.queue.Forget(key)
	}
	return true
}

// sync brings one pod forward: bind it, start it, stop it or remove it. A positive duration
// asks to look again after it.
func (a *Agent) sync(ctx context.Context, key string) (time.Duration, error) {
	obj, exists, err := a.pods.GetByKey(key)
	if err != nil {
		return 0, err
	}
	a.mu.Lock()
	run := a.runs[key]
	a.mu.Unlock()
	if !exists {
		if run != nil {
			// Removed without us (force deletion): kill at once.
			run.stop(0)
			a.forget(key, run)
		}
		return 0, nil
	}
	pod := obj.(*corev1.Pod)
	if run != nil && run.uid != pod.UID {
		run.stop(0)
		a.forget(key, run)
		run = nil
	}
	if pod.Spec.NodeName == "" {
		if pod.DeletionTimestamp != nil || (pod.Spec.SchedulerName != "" && pod.Spec.SchedulerName != defaultScheduler) {
			return 0, nil
		}
		return a.schedule(ctx, pod)
	}
	if !a.ours(pod.Spec.NodeName) {
		return 0, nil
	}
	if pod.DeletionTimestamp != nil {
		if run != nil && !run.finished() {
			run.stop(gracePeriod(pod))
			return 0, nil
		}
		return 0, a.remove(ctx, pod)
	}
	if run == nil && pod.Status.Phase != corev1.PodSucceeded && pod.Status.Phase != corev1.PodFailed {
		a.start(ctx, pod)
	}
	return 0, nil
}

// ours reports whether node is one of the agent's Nodes.
func (a *Agent) ours(node string) bool {
	for _, n := range a.opts.Nodes {
		if n.Name == node {
			return true
		}
	}
	return false
}

// schedule binds pod to a node that fits, or records PodScheduled=False and looks again later.
func (a *Agent) schedule(ctx context.Context, pod *corev1.Pod) (time.Duration, error) {
	nodes := make([]candidate, len(a.opts.Nodes))
	for i, n := range a.opts.Nodes {
		nodes[i] = candidate{NodeSpec: n}
	}
	for _, o := range a.pods.List() {
		p := o.(*corev1.Pod)
		if p.Status.Phase == corev1.PodSucceeded || p.Status.Phase == corev1.PodFailed {
			continue
		}
		for i := range nodes {
			if p.Spec.NodeName == nodes[i].Name {
				nodes[i].running++
			}
		}
	}
	node, why := place(pod, nodes, a.opts.MaxPodsPerNode)
	if node == "" {
		st := pod.Status.DeepCopy()
		st.Phase = corev1.PodPending
		st.Conditions = setCondition(st.Conditions, corev1.PodCondition{
			Type: corev1.PodScheduled, Status: corev1.ConditionFalse, Reason: corev1.PodReasonUnschedulable, Message: why,
		}, metav1.Now())
		if !podConditionEqual(pod.Status.Conditions, st.Conditions) {
			p := pod.DeepCopy()
			p.Status = *st
			if _, err := a.opts.Client.CoreV1().Pods(pod.Namespace).UpdateStatus(ctx, p, metav1.UpdateOptions{}); err != nil && !apierrors.IsNotFound(err) && !apierrors.IsConflict(err) {
				return 0, err
			}
		}
		return time.Second, nil
	}
	err := a.opts.Client.CoreV1().Pods(pod.Namespace).Bind(ctx, &corev1.Binding{
		ObjectMeta: metav1.ObjectMeta{Name: pod.Name, Namespace: pod.Namespace, UID: pod.UID},
		Target:     corev1.ObjectReference{Kind: "Node", Name: node},
	}, metav1.CreateOptions{})
	if apierrors.IsNotFound(err) || apierrors.IsConflict(err) {
		return 0, nil // gone, or bound meanwhile
	}
	if err == nil {
		a.log.V(1).Info("bound", "pod", pod.Namespace+"/"+pod.Name, "node", node)
	}
	return 0, err
}

// podConditionEqual compares conditions by type, status, reason and message.
func podConditionEqual(a, b []corev1.PodCondition) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i].Type != b[i].Type || a[i].Status != b[i].Status || a[i].Reason != b[i].Reason || a[i].Message != b[i].Message {
			return false
		}
	}
	return true
}

// start begins running pod in its own goroutine.
func (a *Agent) start(ctx context.Context, pod *corev1.Pod) {
	key := pod.Namespace + "/" + pod.Name
	r := newPodRun(a, pod, filepath.Join(a.opts.Dir, pod.Namespace, pod.Name+"-"+string(pod.UID)[:8]))
	a.mu.Lock()
	a.runs[key] = r
	a.mu.Unlock()
	a.wg.Go(func() { r.run(ctx) })
}

// forget drops the record of a pod that is gone.
func (a *Agent) forget(key string, r *podRun) {
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.runs[key] == r {
		delete(a.runs, key)
		delete(a.deleted, r.uid)
	}
}

// remove deletes a pod whose process has ended with grace period 0, once. Finalizers (such as
// the Job controller's batch.kubernetes.io/job-tracking) are left to their owners.
func (a *Agent) remove(ctx context.Context, pod *corev1.Pod) error {
	a.mu.Lock()
	done := a.deleted[pod.UID]
	a.deleted[pod.UID] = true
	a.mu.Unlock()
	if done {
		return nil
	}
	err := a.opts.Client.CoreV1().Pods(pod.Namespace).Delete(ctx, pod.Name, metav1.DeleteOptions{
		GracePeriodSeconds: ptrTo[int64](0),
		Preconditions:      &metav1.Preconditions{UID: &pod.UID},
	})
	if err != nil && !apierrors.IsNotFound(err) && !apierrors.IsConflict(err) {
		a.mu.Lock()
		delete(a.deleted, pod.UID)
		a.mu.Unlock()
		return err
	}
	return nil
}

// gracePeriod returns the pod's deletion grace period (30 s when none is set, the API default).
func gracePeriod(pod *corev1.Pod) time.Duration {
	switch {
	case pod.DeletionGracePeriodSeconds != nil:
		return time.Duration(*pod.DeletionGracePeriodSeconds) * time.Second
	case pod.Spec.TerminationGracePeriodSeconds != nil:
		return time.Duration(*pod.Spec.TerminationGracePeriodSeconds) * time.Second
	}
	return 30 * time.Second
}

// register creates or refreshes the Node object with capacity and a Ready condition.
func (a *Agent) register(ctx context.Context, n NodeSpec) error {
	nodes := a.opts.Client.CoreV1().Nodes()
	want := &corev1.Node{ObjectMeta: metav1.ObjectMeta{Name: n.Name, Labels: map[string]string{}}}
	for k, v := range n.Labels {
		want.Labels[k] = v
	}
	want.Labels[corev1.LabelHostname] = n.Name
	want.Labels[corev1.LabelOSStable] = "linux"
	want.Spec.Taints = n.Taints
	got, err := nodes.Create(ctx, want, metav1.CreateOptions{})
	if apierrors.IsAlreadyExists(err) {
		got, err = nodes.Get(ctx, n.Name, metav1.GetOptions{})
		if err == nil {
			got.Labels, got.Spec.Taints = want.Labels, n.Taints
			got, err = nodes.Update(ctx, got, metav1.UpdateOptions{})
		}
	}
	if err != nil {
		return err
	}
	return a.updateNodeStatus(ctx, got)
}

// updateNodeStatus writes capacity, addresses and a fresh Ready condition.
func (a *Agent) updateNodeStatus(ctx context.Context, node *corev1.Node) error {
	now := metav1.Now()
	capacity := corev1.ResourceList{
		corev1.ResourceCPU:    resource.MustParse("8"),
		corev1.ResourceMemory: resource.MustParse("32Gi"),
		corev1.ResourcePods:   *resource.NewQuantity(int64(a.opts.MaxPodsPerNode), resource.DecimalSI),
	}
	node.Status.Capacity, node.Status.Allocatable = capacity, capacity
	node.Status.Addresses = []corev1.NodeAddress{{Type: corev1.NodeInternalIP, Address: loopback}, {Type: corev1.NodeHostName, Address: node.Name}}
	node.Status.NodeInfo.KubeletVersion = "localnode"
	node.Status.DaemonEndpoints.KubeletEndpoint.Port = a.logPort
	node.Status.NodeInfo.OperatingSystem, node.Status.NodeInfo.Architecture = "linux", "amd64"
	ready := corev1.NodeCondition{Type: corev1.NodeReady, Status: corev1.ConditionTrue, Reason: "LocalnodeReady", Message: "localnode agent is running", LastHeartbeatTime: now, LastTransitionTime: now}
	for _, c := range node.Status.Conditions {
		if c.Type == corev1.NodeReady && c.Status == corev1.ConditionTrue {
			ready.LastTransitionTime = c.LastTransitionTime
		}
	}
	node.Status.Conditions = []corev1.NodeCondition{ready}
	_, err := a.opts.Client.CoreV1().Nodes().UpdateStatus(ctx, node, metav1.UpdateOptions{})
	return err
}

// heartbeat renews each Node's Lease in kube-node-lease every 10 s and its Ready condition
// every 40 s (the kubelet's defaults, from memory), until ctx ends.
func (a *Agent) heartbeat(ctx context.Context) {
	tick := time.NewTicker(10 * time.Second)
	defer tick.Stop()
	for i := 0; ; i++ {
		for _, n := range a.opts.Nodes {
			if err := a.renewLease(ctx, n.Name); err != nil && ctx.Err() == nil {
				a.log.Error(err, "renew lease", "node", n.Name)
			}
			if i%4 == 3 {
				node, err := a.opts.Client.CoreV1().Nodes().Get(ctx, n.Name, metav1.GetOptions{})
				if err == nil {
					err = a.updateNodeStatus(ctx, node)
				}
				if err != nil && ctx.Err() == nil {
					a.log.Error(err, "node status", "node", n.Name)
				}
			}
		}
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
		}
	}
}

// renewLease creates or renews the Node's Lease.
func (a *Agent) renewLease(ctx context.Context, node string) error {
	leases := a.opts.Client.CoordinationV1().Leases(corev1.NamespaceNodeLease)
	now := metav1.NewMicroTime(time.Now())
	l, err := leases.Get(ctx, node, metav1.GetOptions{})
	if apierrors.IsNotFound(err) {
		_, err = leases.Create(ctx, &coordinationv1.Lease{
			ObjectMeta: metav1.ObjectMeta{Name: node, Namespace: corev1.NamespaceNodeLease},
			Spec:       coordinationv1.LeaseSpec{HolderIdentity: ptrTo(node), LeaseDurationSeconds: ptrTo[int32](40), RenewTime: &now},
		}, metav1.CreateOptions{})
		return err
	}
	if err != nil {
		return err
	}
	l.Spec.RenewTime = &now
	_, err = leases.Update(ctx, l, metav1.UpdateOptions{})
	return err
}

// apiData reads ConfigMaps and Secrets straight from the API server.
type apiData struct{ c kubernetes.Interface }

func (d apiData) configMap(ctx context.Context, ns, name string) (map[string]string, error) {
	cm, err := d.c.CoreV1().ConfigMaps(ns).Get(ctx, name, metav1.GetOptions{})
	if apierrors.IsNotFound(err) {
		return nil, fmt.Errorf("%w: %v", errNotFound, err)
	}
	if err != nil {
		return nil, err
	}
	out := map[string]string{}
	for k, v := range cm.Data {
		out[k] = v
	}
	for k, v := range cm.BinaryData {
		out[k] = string(v)
	}
	return out, nil
}

func (d apiData) secret(ctx context.Context, ns, name string) (map[string][]byte, error) {
	s, err := d.c.CoreV1().Secrets(ns).Get(ctx, name, metav1.GetOptions{})
	if apierrors.IsNotFound(err) {
		return nil, fmt.Errorf("%w: %v", errNotFound, err)
	}
	if err != nil {
		return nil, err
	}
	return s.Data, nil
}
