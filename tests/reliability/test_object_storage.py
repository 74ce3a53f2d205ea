"""Workers on other machines: designs and report files in an S3-compatible store, nothing on a shared disk.

An S3 endpoint on a loopback port (moto's server, a stand-in for the lab's object store); the worker
gets a var folder of its own, so the only things it shares with the site are the database, the broker
and the bucket.
"""

import pytest
from django.urls import reverse

from tests.reliability.helpers import box_stl, submit
from tests.reliability.servers import free_port, wait_until
from tests.webapp.worker import worker_process

pytestmark = [pytest.mark.slow, pytest.mark.django_db(transaction=True)]

BUCKET, KEY, SECRET = "tarn-valley-designs", "test-access-key", "test-secret-key"


@pytest.fixture
def object_store():
    moto_server = pytest.importorskip("moto.server")
    pytest.importorskip("storages.backends.s3")
    import boto3

    port = free_port()
    server = moto_server.ThreadedMotoServer(ip_address="127.0.0.1", port=port, verbose=False)
    server.start()
    endpoint = f"http://127.0.0.1:{port}"
    client = boto3.client("s3", endpoint_url=endpoint, aws_access_key_id=KEY, aws_secret_access_key=SECRET,
                          region_name="us-east-1")
    client.create_bucket(Bucket=BUCKET)
    try:
        yield endpoint, client
    finally:
        server.stop()


def test_a_worker_that_shares_no_disk_checks_through_the_object_store(alice, alice_client, seeded, redis,
                                                                      object_store, settings, tmp_path):
    """The design goes to the bucket, a worker with its own folder reads it there and writes the report files
    there, and the site streams a picture back from the bucket."""
    endpoint, s3 = object_store
    options = {"bucket_name": BUCKET, "endpoint_url": endpoint, "region_name": "us-east-1", "location": "pw",
               "access_key": KEY, "secret_key": SECRET, "addressing_style": "path", "default_acl": None,
               "querystring_auth": True, "file_overwrite": True}
    settings.STORAGES = {**settings.STORAGES, "default": {"BACKEND": "storages.backends.s3.S3Storage", "OPTIONS": options}}
    env = {"PHASEWRIGHT_STORAGE": "s3", "PHASEWRIGHT_S3_BUCKET": BUCKET, "PHASEWRIGHT_S3_ENDPOINT_URL": endpoint,
           "PHASEWRIGHT_S3_REGION": "us-east-1", "PHASEWRIGHT_S3_PREFIX": "pw", "PHASEWRIGHT_S3_ACCESS_KEY": KEY,
           "PHASEWRIGHT_S3_SECRET_KEY": SECRET, "PHASEWRIGHT_VAR_DIR": str(tmp_path / "worker-machine")}
    with worker_process(redis_url=redis.url, extra_env=env):
        check = submit(alice, box_stl(), "box.stl")
        wait_until(lambda: (check.refresh_from_db() or check).status in ("done", "failed"), timeout_s=180,
                   what="the check ending")
    assert check.status == "done", check.error
    keys = {o["Key"] for o in s3.list_objects_v2(Bucket=BUCKET)["Contents"]}
    assert f"pw/{check.design.stored_name}" in keys
    assert {f"pw/reports/{check.public_id}/{name}" for name in check.report["figures"]} <= keys
    assert not (tmp_path / "worker-machine" / "private").exists()  # the worker wrote nothing to its own disk
    name = check.report["figures"][0]
    picture = alice_client.get(reverse("check_file", args=[check.public_id, name]))
    assert picture.status_code == 200 and b"".join(picture.streaming_content)[:8] == b"\x89PNG\r\n\x1a\n"
