"""Malformed and hostile frames on every socket of the kernel (Jupyter
messaging 5.3, "The Wire Protocol": identities, `<IDS|MSG>`, HMAC
signature, header, parent header, metadata, content, buffers). Whatever
arrives, the kernel stays up, answers the next good request, and executes
nothing that is not signed with the connection key (a replayed message
counts as unsigned).

The kernel runs the development binary's toy session (`print TEXT` writes
TEXT to stdout), which shares the real protocol layer with `baroc kernel`.
Frames are generated from a fixed seed, so a failure reproduces."""

from __future__ import annotations

import hashlib
import hmac
import json
import os
import random
import socket as tcp
import tempfile
import time
import uuid
from pathlib import Path

import pytest
import zmq
from jupyter_client.manager import KernelManager
from jupyter_client.session import Session

from kernel_env import DOUBLE

MARKER = "fuzz-marker-executed"
DELIMITER = b"<IDS|MSG>"


@pytest.fixture(scope="module")
def kernel():
    log = tempfile.NamedTemporaryFile(prefix="baroc-fuzz-kernel-", suffix=".log", delete=False)
    km = KernelManager(kernel_name=DOUBLE)
    km.start_kernel(stderr=log)
    kc = km.client()
    kc.start_channels()
    kc.wait_for_ready(timeout=30)
    yield km, kc, Path(log.name)
    kc.stop_channels()
    km.shutdown_kernel(now=True)
    log.close()
    os.unlink(log.name)


def connect(km, channel, kind=zmq.DEALER):
    info = km.get_connection_info()
    s = zmq.Context.instance().socket(kind)
    s.linger = 0
    s.connect(f"{info['transport']}://{info['ip']}:{info[channel + '_port']}")
    return s


def header(msg_type, session="fuzz"):
    return {"msg_id": uuid.uuid4().hex, "session": session, "username": "fuzz", "date": "2026-12-03T00:00:00.000000Z", "msg_type": msg_type, "version": "5.3"}


def signed(key, parts, digest=hashlib.sha256):
    mac = hmac.new(key, digestmod=digest)
    for p in parts:
        mac.update(p)
    return mac.hexdigest().encode()


def frames(key, head, content, parent=b"{}", metadata=b"{}", digest=hashlib.sha256):
    head = head if isinstance(head, bytes) else json.dumps(head).encode()
    content = content if isinstance(content, bytes) else json.dumps(content).encode()
    parts = [head, parent, metadata, content]
    return [DELIMITER, signed(key, parts, digest), *parts]


def execute(code):
    return {"code": code, "silent": False, "store_history": True, "user_expressions": {}, "allow_stdin": False, "stop_on_error": True}


def drain_iopub(kc, seconds=0.3):
    seen = []
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        try:
            seen.append(kc.get_iopub_msg(timeout=0.05))
        except Exception:
            pass
    return seen


def execution_count(kc):
    msg_id = kc.execute("print count", store_history=True)
    deadline = time.monotonic() + 10
    while True:
        reply = kc.get_shell_msg(timeout=max(0.01, deadline - time.monotonic()))
        if reply["parent_header"].get("msg_id") == msg_id:
            assert reply["content"]["status"] == "ok"
            return reply["content"]["execution_count"]


def assert_serving(km, kc):
    """Alive, and answering on shell, control and heartbeat."""
    assert km.is_alive()
    msg_id = kc.kernel_info()
    reply = kc.get_shell_msg(timeout=10)
    while reply["parent_header"].get("msg_id") != msg_id:
        reply = kc.get_shell_msg(timeout=10)
    assert reply["content"]["status"] == "ok"
    control = connect(km, "control")
    try:
        session = Session(key=km.session.key, signature_scheme="hmac-sha256")
        session.send(control, "kernel_info_request", {})
        assert control.poll(10_000), "no answer on control"
        assert session.recv(control)[1]["msg_type"] == "kernel_info_reply"
    finally:
        control.close()
    hb = connect(km, "hb", zmq.REQ)
    try:
        hb.send(b"ping")
        assert hb.poll(5_000) and hb.recv() == b"ping"
    finally:
        hb.close()


def unsigned_cases(key, rng):
    """Frames that must never execute: forged, tampered, replayed-like,
    wrong scheme, broken structure, and random mutations of a genuine
    message that was never sent as it is."""
    code = execute(f"print {MARKER}")
    cases = []
    # Signed with another key, or with the right key under another scheme
    # (the connection file says hmac-sha256).
    cases.append(frames(b"not-the-key", header("execute_request"), code))
    for digest in (hashlib.md5, hashlib.sha1, hashlib.sha512, hashlib.sha3_256):
        cases.append(frames(key, header("execute_request"), code, digest=digest))
    # No signature, an empty one, non-hex, the right length of zeros.
    good = frames(key, header("execute_request"), code)
    for signature in (b"", b"zz" * 32, b"0" * 64, good[1][:-2], good[1] + b"00"):
        cases.append([DELIMITER, signature, *good[2:]])
    # Structure: no delimiter, too few frames, only the delimiter, junk.
    cases.append(good[1:])
    cases.append(good[:4])
    cases.append([DELIMITER])
    cases.append([b"identity", DELIMITER])
    cases.append([bytes(rng.getrandbits(8) for _ in range(rng.randrange(1, 200))) for _ in range(rng.randrange(1, 12))])
    # Oversized content, unsigned.
    cases.append([DELIMITER, b"0" * 64, *good[2:5], json.dumps(execute(f"print {MARKER} " + "x" * (32 << 20))).encode()])
    # Random mutations of a genuine message: a flipped byte, a truncated or
    # dropped frame, a frame inserted among the signed ones. Each changes
    # a signed part or the layout, so none may run.
    for _ in range(400):
        message = frames(key, header("execute_request"), code)
        kind = rng.randrange(4)
        if kind == 0:
            i = rng.randrange(2, 6)
            frame = bytearray(message[i])
            at = rng.randrange(len(frame)) if frame else 0
            if frame:
                frame[at] ^= 1 << rng.randrange(8)
            message[i] = bytes(frame)
        elif kind == 1:
            i = rng.randrange(1, 6)
            message[i] = message[i][: rng.randrange(len(message[i]) + 1) - 1 if message[i] else 0]
        elif kind == 2:
            del message[rng.randrange(0, 6)]
        else:
            message.insert(rng.randrange(2, 6), bytes(rng.getrandbits(8) for _ in range(rng.randrange(0, 40))))
        cases.append(message)
    return cases


@pytest.mark.parametrize("channel", ["shell", "control", "stdin"])
def test_unsigned_frames_on_the_request_sockets_run_nothing(kernel, channel):
    km, kc, log = kernel
    key = km.session.key
    rng = random.Random(f"wire-fuzz-{channel}")
    before = execution_count(kc)
    drain_iopub(kc, 0.2)
    sock = connect(km, channel)
    try:
        for case in unsigned_cases(key, rng):
            sock.send_multipart(case)
        # Replays: a genuine request runs once; the same frames again, and
        # the same signature spelt in capitals (the same HMAC), do not.
        genuine = frames(key, header("execute_request"), execute(f"print replay-{channel}"))
        shell = connect(km, "shell")
        try:
            shell.send_multipart(genuine)
            assert shell.poll(10_000)
            shell.recv_multipart()
        finally:
            shell.close()
        for replay in (genuine, [genuine[0], genuine[1].upper(), *genuine[2:]]):
            sock.send_multipart(replay)
        time.sleep(0.5)
        answers = 0
        while sock.poll(100):
            sock.recv_multipart()
            answers += 1
        assert answers == 0, f"{answers} unsigned, malformed or replayed requests on {channel} were answered"
    finally:
        sock.close()
    seen = drain_iopub(kc, 1.0)
    printed = [m["content"].get("text", "") for m in seen if m["msg_type"] == "stream"]
    assert not any(MARKER in text for text in printed), "an unsigned request ran"
    ran_replay = sum(text.count(f"replay-{channel}") for text in printed)
    assert ran_replay == 1, "a replayed request ran again"
    assert execution_count(kc) == before + 2
    assert_serving(km, kc)
    text = log.read_text()
    assert f"dropped a message on {channel}" in text


def test_signed_but_malformed_messages_do_not_stop_the_kernel(kernel):
    # A client holding the key can still send nonsense: bad JSON, missing
    # or mistyped header fields, content of the wrong shape, unknown message
    # types, oversized content. Each is refused or answered with an error.
    km, kc, _ = kernel
    key = km.session.key
    cases = []
    h = header("kernel_info_request")
    cases.append(frames(key, b"{not json", {}))
    cases.append(frames(key, h, b"\xff\xfe not utf-8"))
    cases.append(frames(key, h, {}, parent=b"[1, 2]"))
    cases.append(frames(key, h, {}, metadata=b"42"))
    for missing in ("msg_id", "msg_type", "session", "username", "date", "version"):
        cases.append(frames(key, {k: v for k, v in header("kernel_info_request").items() if k != missing}, {}))
    for field, value in (("msg_type", 5), ("msg_id", None), ("session", []), ("date", {}), ("version", 5.3)):
        cases.append(frames(key, {**header("kernel_info_request"), field: value}, {}))
    cases.append(frames(key, b'"a string"', {}))
    cases.append(frames(key, h, b"[]"))
    for msg_type in ("frobnicate_request", "", "execute_reply", "x" * 10_000, "shutdown_reply"):
        cases.append(frames(key, header(msg_type), {}))
    # Content of the wrong types for real requests.
    for content in (
        {"code": 5},
        {"code": None, "silent": "yes"},
        {"code": "print typed", "user_expressions": [1, 2]},
        {"code": "print typed", "allow_stdin": "maybe", "stop_on_error": 7},
        {"code": "pr", "cursor_pos": -1},
        {"code": "pr", "cursor_pos": "end"},
        {"code": "print x", "cursor_pos": 10**30, "detail_level": "high"},
        {"hist_access_type": 3, "n": "ten"},
        {"target_name": None},
        {},
    ):
        for msg_type in ("execute_request", "complete_request", "inspect_request", "is_complete_request", "history_request", "comm_info_request"):
            cases.append(frames(key, header(msg_type), content))
    # Oversized but well-formed: 32 MB of content on a request that ignores it.
    cases.append(frames(key, header("kernel_info_request"), {"padding": "x" * (32 << 20)}))
    for channel in ("shell", "control", "stdin"):
        sock = connect(km, channel)
        try:
            for case in cases:
                # Each genuine message once: re-sign per socket with a fresh id
                # where the header is a dict (otherwise it is a replay).
                sock.send_multipart(case if channel == "shell" else resigned(key, case))
            time.sleep(0.5)
            while sock.poll(200):
                sock.recv_multipart()
        finally:
            sock.close()
        assert_serving(km, kc)


def resigned(key, case):
    """The same frames with a fresh msg_id where the header parses, signed again."""
    head = case[2]
    try:
        value = json.loads(head)
        if isinstance(value, dict):
            value["msg_id"] = uuid.uuid4().hex
            head = json.dumps(value).encode()
    except ValueError:
        head = head + b" "
    parts = [head, *case[3:6]]
    return [DELIMITER, signed(key, parts), *parts]


def test_junk_on_iopub_heartbeat_and_raw_tcp_is_ignored(kernel):
    km, kc, _ = kernel
    rng = random.Random("wire-fuzz-iopub-hb")
    info = km.get_connection_info()
    # A subscriber sending junk subscriptions and frames to the publisher.
    xsub = connect(km, "iopub", zmq.XSUB)
    try:
        for _ in range(200):
            xsub.send(bytes(rng.getrandbits(8) for _ in range(rng.randrange(0, 300))))
        xsub.send(b"\x01")  # subscribe to everything, then leave
        xsub.send(b"\x00")
    finally:
        xsub.close()
    # Heartbeat: a dealer without the REQ envelope, and huge pings.
    hb = connect(km, "hb")
    try:
        for _ in range(100):
            hb.send_multipart([bytes(rng.getrandbits(8) for _ in range(rng.randrange(0, 100))) for _ in range(rng.randrange(1, 4))])
        hb.send_multipart([b"", b"p" * (8 << 20)])
        while hb.poll(300):
            hb.recv_multipart()
    finally:
        hb.close()
    # Bytes that are not ZeroMQ at all, on every port.
    if info["transport"] == "tcp":
        for channel in ("shell", "control", "stdin", "iopub", "hb"):
            for _ in range(5):
                with tcp.create_connection((info["ip"], info[channel + "_port"]), timeout=5) as raw:
                    try:
                        raw.sendall(bytes(rng.getrandbits(8) for _ in range(rng.randrange(1, 4096))))
                        raw.sendall(b"\xff" + b"\x00" * 8 + b"\x7f" + b"\x03\x00" + b"NULL" + b"\x00" * 48)
                    except (ConnectionResetError, BrokenPipeError):
                        # The kernel hanging up on bytes that are not ZeroMQ
                        # is the right answer; what matters is that it then
                        # goes on serving (checked below).
                        pass
    assert_serving(km, kc)
    assert not any(MARKER in m["content"].get("text", "") for m in drain_iopub(kc, 0.5) if m["msg_type"] == "stream")
