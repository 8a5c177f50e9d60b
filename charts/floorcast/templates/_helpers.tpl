{{/* The release's base name: "floorcast" stays as is, anything else gets a suffix. */}}
{{- define "floorcast.fullname" -}}
{{- if .Values.fullnameOverride -}}
{{- .Values.fullnameOverride | trunc 63 | trimSuffix "-" -}}
{{- else -}}
{{- $name := default .Chart.Name .Values.nameOverride -}}
{{- if contains $name .Release.Name -}}
{{- .Release.Name | trunc 63 | trimSuffix "-" -}}
{{- else -}}
{{- printf "%s-%s" .Release.Name $name | trunc 63 | trimSuffix "-" -}}
{{- end -}}
{{- end -}}
{{- end -}}

{{- define "floorcast.selectorLabels" -}}
app.kubernetes.io/name: {{ default .Chart.Name .Values.nameOverride }}
app.kubernetes.io/instance: {{ .Release.Name }}
{{- end -}}

{{- define "floorcast.labels" -}}
{{ include "floorcast.selectorLabels" . }}
app.kubernetes.io/version: {{ .Chart.AppVersion | quote }}
app.kubernetes.io/managed-by: {{ .Release.Service }}
helm.sh/chart: {{ printf "%s-%s" .Chart.Name .Chart.Version }}
{{- with .Values.extraLabels }}
{{ toYaml . }}
{{- end }}
{{- end -}}

{{- define "floorcast.serviceAccountName" -}}
{{- if .Values.serviceAccount.create -}}
{{- default (include "floorcast.fullname" .) .Values.serviceAccount.name -}}
{{- else -}}
{{- default "default" .Values.serviceAccount.name -}}
{{- end -}}
{{- end -}}

{{- define "floorcast.image" -}}
{{- printf "%s:%s" .Values.image.repository (default .Chart.AppVersion .Values.image.tag) -}}
{{- end -}}

{{/* The operator's rules, read from files/operator-rbac.yaml (the one copy). */}}
{{- define "floorcast.operatorRules" -}}
{{- $rbac := .Files.Get "files/operator-rbac.yaml" | fromYaml -}}
{{- required "files/operator-rbac.yaml has no rules" $rbac.rules | toYaml -}}
{{- end -}}

{{/* The Lease rules for leader election, read from files/leader-election-rbac.yaml. */}}
{{- define "floorcast.leaderElectionRules" -}}
{{- $rbac := .Files.Get "files/leader-election-rbac.yaml" | fromYaml -}}
{{- required "files/leader-election-rbac.yaml has no rules" $rbac.rules | toYaml -}}
{{- end -}}

{{/* The Lease's name: the release's full name unless set. */}}
{{- define "floorcast.leaseName" -}}
{{- default (include "floorcast.fullname" .) .Values.leaderElection.leaseName -}}
{{- end -}}

{{/* Pod and container hardening shared by the operator and the forecast job. */}}
{{- define "floorcast.podSecurityContext" -}}
runAsNonRoot: true
runAsUser: 10001
runAsGroup: 10001
fsGroup: 10001
seccompProfile:
  type: RuntimeDefault
{{- end -}}

{{- define "floorcast.containerSecurityContext" -}}
allowPrivilegeEscalation: false
readOnlyRootFilesystem: true
runAsNonRoot: true
capabilities:
  drop: [ALL]
seccompProfile:
  type: RuntimeDefault
{{- end -}}

{{/* Namespaces the forecast job writes ConfigMaps into, one per line. */}}
{{- define "floorcast.forecastNamespaces" -}}
{{- $seen := dict -}}
{{- range .Values.forecast.workloads -}}
{{- $_ := set $seen (default $.Release.Namespace .namespace) true -}}
{{- end -}}
{{- keys $seen | sortAlpha | join "\n" -}}
{{- end -}}
