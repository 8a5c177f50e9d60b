"""The policy's finalizer: held while the operator may have a floor to restore.

Written as a merge patch of the whole ``metadata.finalizers`` list with the
``resourceVersion`` just read as a precondition (custom resources take no strategic
merge patch), so another controller's finalizer added meanwhile is never dropped: a
409 means read again and retry.
"""

from __future__ import annotations

from kubernetes import client as k8s
from kubernetes.client.rest import ApiException

from floorcast.kube.policies import GROUP, MERGE_PATCH, PLURAL, VERSION

#: The same name kopf used for this operator before it managed its own finalizer, so
#: policies created by an earlier version are released the same way.
FINALIZER = "floorcast.dev/restore-baseline"
RETRIES = 5


def set_finalizer(api: k8s.ApiClient, namespace: str, name: str, *, present: bool,
                  timeout: float) -> bool:  # fmt: skip
    """Add or remove ours; True if a write happened. A policy already gone is fine."""
    custom = k8s.CustomObjectsApi(api)
    for _ in range(RETRIES):
        try:
            obj = custom.get_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL, name,
                                                      _request_timeout=timeout)  # fmt: skip
        except ApiException as e:
            if e.status == 404:
                return False
            raise
        meta = obj.get("metadata") or {}
        have = list(meta.get("finalizers") or [])
        if (FINALIZER in have) == present:
            return False
        want = [*have, FINALIZER] if present else [f for f in have if f != FINALIZER]
        body = {"metadata": {"finalizers": want, "resourceVersion": meta.get("resourceVersion")}}
        try:
            custom.patch_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL, name, body,
                                                  _content_type=MERGE_PATCH,
                                                  _request_timeout=timeout)  # fmt: skip
            return True
        except ApiException as e:
            if e.status == 404:
                return False
            if e.status != 409:
                raise
    raise RuntimeError(f"policy {namespace}/{name} kept changing while its finalizer was set")
