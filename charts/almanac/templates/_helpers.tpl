{{/*
almanac.prefix is the start of every object name: the release name, or namePrefix when set.
Truncated so that the longest name (<prefix>-controller-manager-metrics) stays within 63.
*/}}
{{- define "almanac.prefix" -}}
{{- default .Release.Name .Values.namePrefix | trunc 36 | trimSuffix "-" -}}
{{- end -}}

{{/* almanac.labels go on every object the chart renders (Kubernetes recommended labels). */}}
{{- define "almanac.labels" -}}
app.kubernetes.io/name: almanac
app.kubernetes.io/instance: {{ .Release.Name }}
app.kubernetes.io/version: {{ .Chart.AppVersion | quote }}
app.kubernetes.io/managed-by: {{ .Release.Service }}
app.kubernetes.io/part-of: almanac
helm.sh/chart: {{ printf "%s-%s" .Chart.Name .Chart.Version }}
{{- end -}}

{{/* almanac.selectorLabels pick the controller pods; they never change after install. */}}
{{- define "almanac.selectorLabels" -}}
app.kubernetes.io/name: almanac
app.kubernetes.io/instance: {{ .Release.Name }}
app.kubernetes.io/component: controller
{{- end -}}

{{/* almanac.image is the controller image reference: repository, then tag or digest. */}}
{{- define "almanac.image" -}}
{{- if .Values.image.digest -}}
{{ .Values.image.repository }}@{{ .Values.image.digest }}
{{- else -}}
{{ .Values.image.repository }}:{{ .Values.image.tag | default .Chart.AppVersion }}
{{- end -}}
{{- end -}}

{{/*
almanac.managerRules are the controller's API rights. They must equal config/rbac/role.yaml,
which controller-gen writes from the +kubebuilder:rbac markers in controllers/
(test/packaging compares them). Every resource here is namespaced, so the same rules serve a
ClusterRole (all namespaces) or one Role per watched namespace.
*/}}
{{- define "almanac.managerRules" -}}
# Portfolios: read, and write their status. Runs: created on schedule or drift, pruned by the
# history limits, status written as shards finish.
- apiGroups: [forecasting.almanac.dev]
  resources: [forecastportfolios]
  verbs: [get, list, watch]
- apiGroups: [forecasting.almanac.dev]
  resources: [forecastruns]
  verbs: [create, delete, get, list, patch, update, watch]
- apiGroups: [forecasting.almanac.dev]
  resources: [forecastportfolios/status, forecastruns/status]
  verbs: [get, patch, update]
- apiGroups: [forecasting.almanac.dev]
  resources: [forecastportfolios/finalizers, forecastruns/finalizers]
  verbs: [update]
# The run's Jobs, and its resolved-configuration ConfigMap (written once, never changed).
- apiGroups: [batch]
  resources: [jobs]
  verbs: [create, delete, get, list, patch, watch]
- apiGroups: [""]
  resources: [configmaps]
  verbs: [create, get, list, watch]
# Trainer pods: read for their termination messages (the shard summaries).
- apiGroups: [""]
  resources: [pods]
  verbs: [get, list, watch]
# Running train pods' logs: the last lines only, for their progress lines (status.progress).
- apiGroups: [""]
  resources: [pods/log]
  verbs: [get]
- apiGroups: [events.k8s.io]
  resources: [events]
  verbs: [create, patch]
{{- end -}}

{{/*
almanac.trainerNamespaces lists the namespaces that get the trainer ServiceAccount:
trainer.serviceAccount.namespaces, else watchNamespaces, else the release namespace.
Returned as a JSON list (include can only return a string).
*/}}
{{- define "almanac.trainerNamespaces" -}}
{{- $ns := .Values.trainer.serviceAccount.namespaces | default .Values.watchNamespaces | default (list .Release.Namespace) -}}
{{- uniq $ns | toJson -}}
{{- end -}}
