// Command almanac-controller is the almanac manager: it runs the ForecastPortfolio and
// ForecastRun controllers, serves Prometheus metrics and health probes, and optionally takes
// part in leader election.
package main

import (
	"context"
	"flag"
	"fmt"
	"os"
	"strings"
	"time"

	"k8s.io/apimachinery/pkg/runtime"
	utilruntime "k8s.io/apimachinery/pkg/util/runtime"
	clientgoscheme "k8s.io/client-go/kubernetes/scheme"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/healthz"
	"sigs.k8s.io/controller-runtime/pkg/log/zap"
	"sigs.k8s.io/controller-runtime/pkg/metrics"
	metricsserver "sigs.k8s.io/controller-runtime/pkg/metrics/server"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/controllers"
)

// version and commit are set at link time (GO_BUILD_FLAGS in the Makefile and Dockerfile).
var (
	version = "dev"
	commit  = "unknown"
)

// leaderElectionID names the Lease the replicas compete for.
const leaderElectionID = "almanac-controller.forecasting.almanac.dev"

// config is the parsed command line.
type config struct {
	metricsAddr         string
	probeAddr           string
	leaderElect         bool
	namespaces          []string
	maxConcurrentShards int
	images              controllers.ImageAllowlist
	progressInterval    time.Duration
	zap                 zap.Options
}

// parseFlags reads the command line; errors name the flag.
func parseFlags(args []string) (config, error) {
	var c config
	var watch, images string
	fs := flag.NewFlagSet("almanac-controller", flag.ContinueOnError)
	fs.StringVar(&c.metricsAddr, "metrics-bind-address", ":8080", "address the Prometheus metrics endpoint binds to (0 disables it)")
	fs.StringVar(&c.probeAddr, "health-probe-bind-address", ":8081", "address the /healthz and /readyz probes bind to")
	fs.BoolVar(&c.leaderElect, "leader-elect", false, "take part in leader election so that only one replica reconciles")
	fs.StringVar(&watch, "watch-namespace", "", "comma-separated namespaces to watch; empty watches all namespaces")
	fs.IntVar(&c.maxConcurrentShards, "max-concurrent-shards", 32, "train pods all active runs may run at once, shared by weight (0: unlimited)")
	fs.StringVar(&images, "trainer-image-prefixes", "", "comma-separated trainer images portfolios may name: a repository (any tag or digest) or a path ending in / (any image under it); empty allows every image")
	fs.DurationVar(&c.progressInterval, "progress-interval", controllers.DefaultProgressInterval,
		"how often a training run reads its running train pods' progress lines (pods/log, the last lines only)")
	c.zap.BindFlags(fs)
	if err := fs.Parse(args); err != nil {
		return c, err
	}
	if c.maxConcurrentShards < 0 || c.maxConcurrentShards > 1<<20 {
		return c, fmt.Errorf("--max-concurrent-shards: %d is not in 0..%d", c.maxConcurrentShards, 1<<20)
	}
	if c.progressInterval < time.Second || c.progressInterval > time.Hour {
		return c, fmt.Errorf("--progress-interval: %s is not in 1s..1h", c.progressInterval)
	}
	var err error
	if c.images, err = controllers.ParseImageAllowlist(images); err != nil {
		return c, fmt.Errorf("--trainer-image-prefixes: %w", err)
	}
	for _, ns := range strings.Split(watch, ",") {
		if ns = strings.TrimSpace(ns); ns != "" {
			c.namespaces = append(c.namespaces, ns)
		}
	}
	return c, nil
}

func main() {
	c, err := parseFlags(os.Args[1:])
	if err != nil {
		fmt.Fprintln(os.Stderr, "almanac-controller:", err)
		os.Exit(2)
	}
	ctrl.SetLogger(zap.New(zap.UseFlagOptions(&c.zap)))
	if err := run(ctrl.SetupSignalHandler(), c); err != nil {
		ctrl.Log.Error(err, "manager stopped")
		os.Exit(1)
	}
}

func run(ctx context.Context, c config) error {
	log := ctrl.Log.WithName("setup")
	log.Info("starting almanac-controller", "version", version, "commit", commit,
		"namespaces", c.namespaces, "maxConcurrentShards", c.maxConcurrentShards, "trainerImagePrefixes", []string(c.images))
	scheme := runtime.NewScheme()
	utilruntime.Must(clientgoscheme.AddToScheme(scheme))
	utilruntime.Must(forecastingv1alpha1.AddToScheme(scheme))
	cacheOpts, err := controllers.CacheOptions(c.namespaces)
	if err != nil {
		return err
	}
	cfg, err := ctrl.GetConfig()
	if err != nil {
		return fmt.Errorf("kubeconfig: %w", err)
	}
	mgr, err := ctrl.NewManager(cfg, ctrl.Options{
		Scheme:                 scheme,
		Cache:                  cacheOpts,
		Metrics:                metricsserver.Options{BindAddress: c.metricsAddr},
		HealthProbeBindAddress: c.probeAddr,
		LeaderElection:         c.leaderElect,
		LeaderElectionID:       leaderElectionID,
	})
	if err != nil {
		return fmt.Errorf("new manager: %w", err)
	}
	m, err := controllers.NewMetrics(metrics.Registry)
	if err != nil {
		return fmt.Errorf("register metrics: %w", err)
	}
	if err := controllers.SetupWithManager(ctx, mgr, controllers.Options{
		MaxConcurrentShards: int32(c.maxConcurrentShards),
		Images:              c.images,
		ProgressInterval:    c.progressInterval,
		Metrics:             m,
	}); err != nil {
		return fmt.Errorf("set up controllers: %w", err)
	}
	if err := mgr.AddHealthzCheck("healthz", healthz.Ping); err != nil {
		return err
	}
	if err := mgr.AddReadyzCheck("readyz", healthz.Ping); err != nil {
		return err
	}
	return mgr.Start(ctx)
}
