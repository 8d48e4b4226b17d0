"""One in-memory S3 (moto) per test module (not per session, so it never outlives the storage tests): starting
it costs about half a second, a fresh bucket per test almost nothing."""

from __future__ import annotations

import uuid
from collections.abc import Iterator
from typing import Any

import boto3
import pytest
from moto import mock_aws


@pytest.fixture(scope="module")
def s3_client() -> Iterator[Any]:
    with mock_aws():
        yield boto3.client("s3", region_name="us-east-1")


@pytest.fixture
def bucket(s3_client: Any) -> str:
    """A fresh, empty bucket for one test."""
    name = f"tracedesk-{uuid.uuid4().hex[:12]}"
    s3_client.create_bucket(Bucket=name)
    return name
