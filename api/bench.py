"""The floor of the API benchmark (``bench_api``): a bare DRF list of 50 rows, served by the
same server with the same authentication, so the figures of the real endpoints can be read
against what DRF itself costs here. Routed only when ``LOOPKEEP_BENCH_FLOOR=1``."""

from __future__ import annotations

from rest_framework import generics, serializers

from inventory import models


class _FloorSerializer(serializers.ModelSerializer):
    class Meta:
        model = models.CurrentTransformer
        fields = ["id", "code", "phase", "secondary_a", "accuracy"]


class FloorList(generics.ListAPIView):
    """50 CT rows, no joins, no pagination, no filters."""

    serializer_class = _FloorSerializer
    pagination_class = None
    filter_backends: list = []
    queryset = models.CurrentTransformer.objects.order_by("id")[:50]
