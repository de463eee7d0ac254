"""The Baroc notebook kernel driven by Jupyter's own client library.

Each check names the part of the Jupyter messaging protocol (version 5.3,
"Messaging in Jupyter") it holds the kernel to. The kernel runs the toy
session of the development binary (integers, names, print/eprint, sleep,
display, panic); the team swaps in the Baroc session later.
"""

from __future__ import annotations

import base64
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import nbformat
import pytest
import zmq
from jupyter_client.kernelspec import KernelSpecManager
from jupyter_client.manager import KernelManager, start_new_kernel
from jupyter_client.session import Session
from nbclient import NotebookClient
from nbclient.exceptions import CellExecutionError

from kernel_env import DOUBLE

TIMEOUT = 10


# ---------------------------------------------------------------- helpers


def shell_reply(kc, msg_id, timeout=TIMEOUT):
    """The shell reply whose parent is msg_id (other replies are skipped)."""
    deadline = time.monotonic() + timeout
    while True:
        msg = kc.get_shell_msg(timeout=max(0.01, deadline - time.monotonic()))
        if msg["parent_header"].get("msg_id") == msg_id:
            return msg


def iopub_until_idle(kc, msg_id, timeout=TIMEOUT):
    """All iopub messages with parent msg_id, up to and including idle."""
    deadline = time.monotonic() + timeout
    seen = []
    while True:
        msg = kc.get_iopub_msg(timeout=max(0.01, deadline - time.monotonic()))
        if msg["parent_header"].get("msg_id") != msg_id:
            continue
        seen.append(msg)
        if msg["msg_type"] == "status" and msg["content"]["execution_state"] == "idle":
            return seen


def run(kc, code, **options):
    """Execute code; return (reply, iopub messages of that request)."""
    msg_id = kc.execute(code, **options)
    reply = shell_reply(kc, msg_id)
    return reply, iopub_until_idle(kc, msg_id)


def types(messages):
    return [m["msg_type"] for m in messages]


def kernel_pid(km):
    provisioner = km.provisioner
    pid = getattr(provisioner, "pid", None)
    return pid if pid is not None else provisioner.process.pid


def wait_dead(km, seconds):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if not km.is_alive():
            return True
        time.sleep(0.05)
    return False


@pytest.fixture(scope="module")
def kernel():
    km, kc = start_new_kernel(kernel_name=DOUBLE, startup_timeout=30)
    yield km, kc
    kc.stop_channels()
    km.shutdown_kernel(now=True)


@pytest.fixture
def kc(kernel):
    km, kc = kernel
    # Leave nothing from an earlier test in the queues.
    for get in (kc.get_shell_msg, kc.get_iopub_msg):
        while True:
            try:
                get(timeout=0.05)
            except Exception:
                break
    return kc


@pytest.fixture
def own_kernel():
    """A kernel of its own, with stderr captured to a file."""
    log = tempfile.NamedTemporaryFile(prefix="baroc-kernel-", suffix=".log", delete=False)
    km = KernelManager(kernel_name=DOUBLE)
    km.start_kernel(stderr=log)
    kc = km.client()
    kc.start_channels()
    kc.wait_for_ready(timeout=30)
    yield km, kc, Path(log.name)
    kc.stop_channels()
    if km.has_kernel:
        km.shutdown_kernel(now=True)
    log.close()
    os.unlink(log.name)


# ---------------------------------------------------------------- kernelspec


def test_kernelspec_is_found_by_jupyter(tmp_path):
    # "Kernel specs": kernel.json with argv, display_name, language,
    # interrupt_mode; logos beside it. Checked with jupyter_client's own finder.
    spec = KernelSpecManager().get_kernel_spec(DOUBLE)
    assert spec.language == "baroc"
    assert spec.display_name == "Baroc"
    assert spec.interrupt_mode == "message"
    assert spec.argv[1:] == ["kernel", "--connection-file", "{connection_file}"]
    assert Path(spec.argv[0]).name.startswith("baroc")
    for name in ("logo-32x32.png", "logo-64x64.png"):
        assert (Path(spec.resource_dir) / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize(
    "variables",
    [
        {"JUPYTER_DATA_DIR": "{tmp}/data"},
        {"XDG_DATA_HOME": "{tmp}/xdg"},
        {},  # only HOME: ~/.local/share/jupyter on Linux
    ],
    ids=["JUPYTER_DATA_DIR", "XDG_DATA_HOME", "HOME"],
)
def test_user_install_goes_where_jupyter_core_looks(tmp_path, request, monkeypatch, variables):
    if sys.platform != "linux":
        pytest.skip("the XDG rules checked here are the Linux ones")
    from jupyter_core.paths import jupyter_data_dir

    binary = request.config.baroc_jupyter.binary
    for name in ("JUPYTER_DATA_DIR", "XDG_DATA_HOME", "JUPYTER_PLATFORM_DIRS"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    for name, value in variables.items():
        monkeypatch.setenv(name, value.format(tmp=tmp_path))
    # The reference: jupyter_core's own idea of the user data directory.
    expected = Path(jupyter_data_dir()) / "kernels" / DOUBLE
    subprocess.run([str(binary), "install", "--user", "--display-name", "Baroc (mine)"], env=dict(os.environ),
                   check=True, capture_output=True)
    spec = KernelSpecManager(kernel_dirs=[str(expected.parent)]).get_kernel_spec(DOUBLE)
    assert spec.display_name == "Baroc (mine)"
    subprocess.run([str(binary), "uninstall", "--user"], env=dict(os.environ), check=True, capture_output=True)
    assert not expected.exists()


def test_ipc_transport(tmp_path):
    # Connection files may name transport "ipc": endpoints are ipc://IP-PORT.
    km = KernelManager(kernel_name=DOUBLE, transport="ipc")
    km.ip = str(tmp_path / "kernel")
    km.start_kernel()
    kc = km.client()
    kc.start_channels()
    try:
        kc.wait_for_ready(timeout=30)
        reply, published = run(kc, "20+22")
        assert reply["content"]["status"] == "ok"
        assert [m for m in published if m["msg_type"] == "execute_result"][0]["content"]["data"] == {
            "text/plain": "42"
        }
    finally:
        kc.stop_channels()
        km.shutdown_kernel(now=True)


# ---------------------------------------------------------------- kernel info and status


def test_kernel_info_reply_and_status_around_it(kc):
    msg_id = kc.kernel_info()
    reply = shell_reply(kc, msg_id)
    content = reply["content"]
    assert content["status"] == "ok"
    assert content["protocol_version"] == "5.3"
    assert content["implementation"] == "baroc"
    assert content["language_info"]["name"] == "baroc"
    assert content["language_info"]["mimetype"] == "text/x-baroc"
    assert content["language_info"]["file_extension"] == ".baroc"
    assert isinstance(content["banner"], str) and content["banner"]
    assert isinstance(content["help_links"], list)
    # Busy/idle around kernel_info too: clients resend kernel_info until
    # they see iopub traffic.
    states = [m["content"]["execution_state"] for m in iopub_until_idle(kc, msg_id)]
    assert states == ["busy", "idle"]


def test_heartbeat_echoes(kernel):
    km, kc = kernel
    assert kc.hb_channel.is_beating()


def test_sockets_bind_only_the_connection_file_address(kernel):
    # /proc/net/tcp lists listening sockets (state 0A) with hex address:port;
    # 127.0.0.1 is 0100007F in the kernel's little-endian notation.
    if not Path("/proc/net/tcp").exists():
        pytest.skip("needs Linux /proc/net/tcp")
    km, _ = kernel
    info = km.get_connection_info()
    assert info["ip"] == "127.0.0.1"
    ports = {info[k] for k in ("shell_port", "iopub_port", "stdin_port", "control_port", "hb_port")}
    listening = {}
    for line in Path("/proc/net/tcp").read_text().splitlines()[1:]:
        fields = line.split()
        address, port = fields[1].split(":")
        if fields[3] == "0A" and int(port, 16) in ports:
            listening.setdefault(int(port, 16), set()).add(address)
    assert set(listening) == ports
    assert all(addresses == {"0100007F"} for addresses in listening.values())


# ---------------------------------------------------------------- execute


def test_execute_result_and_message_order(kc):
    reply, published = run(kc, "1+2*(7-4)")
    assert reply["content"]["status"] == "ok"
    count = reply["content"]["execution_count"]
    assert types(published) == ["status", "execute_input", "execute_result", "status"]
    assert published[1]["content"] == {"code": "1+2*(7-4)", "execution_count": count}
    assert published[2]["content"]["data"]["text/plain"] == "7"
    assert published[2]["content"]["execution_count"] == count
    assert reply["content"]["payload"] == []
    assert reply["content"]["user_expressions"] == {}
    again, _ = run(kc, "5")
    assert again["content"]["execution_count"] == count + 1


def test_streams(kc):
    reply, published = run(kc, "print hello\neprint careful")
    assert reply["content"]["status"] == "ok"
    streams = [(m["content"]["name"], m["content"]["text"]) for m in published if m["msg_type"] == "stream"]
    assert streams == [("stdout", "hello\n"), ("stderr", "careful\n")]


def test_display_data_carries_html_and_base64_png(kc):
    reply, published = run(kc, "display")
    assert reply["content"]["status"] == "ok"
    displays = [m for m in published if m["msg_type"] == "display_data"]
    assert len(displays) == 1
    data = displays[0]["content"]["data"]
    assert set(data) == {"text/plain", "text/html", "image/png"}
    # Binary entries travel base64-encoded (nbformat, "Display Data").
    assert base64.b64decode(data["image/png"])[:8] == b"\x89PNG\r\n\x1a\n"


def test_error_is_published_before_the_reply_and_carries_the_count(kc):
    msg_id = kc.execute("2*(3+x")
    reply = shell_reply(kc, msg_id)
    published = iopub_until_idle(kc, msg_id)
    content = reply["content"]
    assert content["status"] == "error"
    assert content["ename"] == "ToyNameError"
    assert isinstance(content["execution_count"], int) and content["execution_count"] > 0
    errors = [m for m in published if m["msg_type"] == "error"]
    assert len(errors) == 1
    assert errors[0]["content"]["traceback"] == content["traceback"]
    # Caret under the offending name: "  2*(3+x" then two spaces, 5 columns, "^".
    assert content["traceback"][1:] == ["  2*(3+x", "       ^"]
    # Both stamped by the kernel's clock: the error was sent first.
    assert errors[0]["header"]["date"] <= reply["header"]["date"]
    assert types(published)[-1] == "status"


def test_silent_and_store_history_leave_the_count(kc):
    first, _ = run(kc, "1")
    count = first["content"]["execution_count"]
    reply, published = run(kc, "print not shown", silent=True)
    # silent: nothing but status on iopub, count unchanged (protocol, "Execute").
    assert types(published) == ["status", "status"]
    assert reply["content"]["execution_count"] == count
    reply, published = run(kc, "print shown", store_history=False)
    assert "stream" in types(published)
    assert reply["content"]["execution_count"] == count
    reply, _ = run(kc, "2")
    assert reply["content"]["execution_count"] == count + 1


def test_user_expressions(kc):
    reply, _ = run(kc, "speed = 12", user_expressions={"double": "speed*2", "missing": "gust"})
    expressions = reply["content"]["user_expressions"]
    assert expressions["double"] == {"status": "ok", "data": {"text/plain": "24"}, "metadata": {}}
    assert expressions["missing"]["status"] == "error"
    assert expressions["missing"]["ename"] == "ToyNameError"


def test_stop_on_error_skips_queued_cells(kc):
    failing = kc.execute("sleep 0.3\n1/0")
    queued = kc.execute("print should not run")
    first = shell_reply(kc, failing)
    second = shell_reply(kc, queued)
    assert first["content"]["status"] == "error"
    assert second["content"]["status"] == "error"
    assert "execution_count" in second["content"]
    # With stop_on_error false the next cell runs.
    failing = kc.execute("sleep 0.3\n1/0", stop_on_error=False)
    queued = kc.execute("print runs")
    assert shell_reply(kc, failing)["content"]["status"] == "error"
    assert shell_reply(kc, queued)["content"]["status"] == "ok"


def test_panic_becomes_an_error_and_the_session_lives_on(kc):
    run(kc, "kept = 41")
    reply, published = run(kc, "panic")
    assert reply["content"]["status"] == "error"
    assert reply["content"]["ename"] == "InternalError"
    assert "error" in types(published)
    reply, published = run(kc, "kept+1")
    assert reply["content"]["status"] == "ok"
    assert [m for m in published if m["msg_type"] == "execute_result"][0]["content"]["data"]["text/plain"] == "42"


# ---------------------------------------------------------------- introspection


def test_complete_counts_code_points(kc):
    run(kc, "größe = 3")
    code = "x = grö"
    # 7 code points, 8 UTF-8 bytes: protocol 5.2+ counts code points.
    msg_id = kc.complete(code, cursor_pos=7)
    content = shell_reply(kc, msg_id)["content"]
    assert content["status"] == "ok"
    assert content["matches"] == ["größe"]
    assert (content["cursor_start"], content["cursor_end"]) == (4, 7)
    msg_id = kc.complete("pri")
    assert shell_reply(kc, msg_id)["content"]["matches"] == ["print"]


def test_inspect(kc):
    msg_id = kc.inspect("print hello", cursor_pos=2)
    content = shell_reply(kc, msg_id)["content"]
    assert content["status"] == "ok" and content["found"] is True
    assert "standard output" in content["data"]["text/plain"]
    msg_id = kc.inspect("nothing_here", cursor_pos=3)
    content = shell_reply(kc, msg_id)["content"]
    assert content["status"] == "ok" and content["found"] is False


@pytest.mark.parametrize(
    "code, status",
    [("1+2", "complete"), ("(1+2", "incomplete"), ("1*", "incomplete"), ("1+2)", "invalid")],
)
def test_is_complete(kc, code, status):
    msg_id = kc.is_complete(code)
    content = shell_reply(kc, msg_id)["content"]
    assert content["status"] == status
    if status == "incomplete":
        assert isinstance(content["indent"], str)


def test_history_returns_stored_entries(kc):
    run(kc, "3*3")
    run(kc, "print between")
    run(kc, "4*4")
    msg_id = kc.history(hist_access_type="tail", n=3, output=False, raw=True)
    history = shell_reply(kc, msg_id)["content"]["history"]
    assert [entry[2] for entry in history] == ["3*3", "print between", "4*4"]
    session, line = history[0][0], history[0][1]
    msg_id = kc.history(hist_access_type="tail", n=1, output=True, raw=True)
    assert shell_reply(kc, msg_id)["content"]["history"][0][2] == ["4*4", "16"]
    msg_id = kc.history(hist_access_type="range", session=session, start=line, stop=line + 1, output=False, raw=True)
    assert shell_reply(kc, msg_id)["content"]["history"] == [[session, line, "3*3"]]
    msg_id = kc.history(hist_access_type="search", pattern="?[*]?", unique=True, output=False, raw=True)
    found = [entry[2] for entry in shell_reply(kc, msg_id)["content"]["history"]]
    assert "3*3" in found and "4*4" in found and "print between" not in found


def test_comm_info_is_empty(kc):
    msg_id = kc.comm_info()
    content = shell_reply(kc, msg_id)["content"]
    assert content == {"status": "ok", "comms": {}}


# ---------------------------------------------------------------- interrupt


def test_interrupt_stops_a_long_cell_within_a_second(kernel, kc):
    km, _ = kernel
    run(kc, "before = 5")
    msg_id = kc.execute("sleep 60")
    time.sleep(0.3)
    started = time.monotonic()
    km.interrupt_kernel()  # interrupt_mode "message": interrupt_request on control
    reply = shell_reply(kc, msg_id, timeout=5)
    assert time.monotonic() - started < 1.0
    assert reply["content"]["status"] == "error"
    assert reply["content"]["ename"] == "Interrupted"
    reply, published = run(kc, "before*2")
    assert reply["content"]["status"] == "ok"
    assert km.is_alive()


def test_control_and_heartbeat_answer_while_a_cell_runs(kernel, kc):
    km, _ = kernel
    msg_id = kc.execute("sleep 60")
    time.sleep(0.3)
    try:
        started = time.monotonic()
        request = kc.session.msg("kernel_info_request", {})
        kc.control_channel.send(request)
        reply = kc.get_control_msg(timeout=5)
        assert reply["parent_header"]["msg_id"] == request["header"]["msg_id"]
        assert reply["content"]["implementation"] == "baroc"
        assert time.monotonic() - started < 0.5
        assert kc.hb_channel.is_beating()
    finally:
        km.interrupt_kernel()
        assert shell_reply(kc, msg_id, timeout=5)["content"]["ename"] == "Interrupted"


def test_interrupt_request_on_shell_is_answered_at_once(kc):
    msg_id = kc.execute("sleep 60")
    time.sleep(0.3)
    started = time.monotonic()
    request = kc.session.msg("interrupt_request", {})
    kc.shell_channel.send(request)
    interrupt_reply = shell_reply(kc, request["header"]["msg_id"], timeout=5)
    assert interrupt_reply["msg_type"] == "interrupt_reply"
    assert interrupt_reply["content"]["status"] == "ok"
    reply = shell_reply(kc, msg_id, timeout=5)
    assert time.monotonic() - started < 1.0
    assert reply["content"]["ename"] == "Interrupted"


def test_sigint_interrupts_and_does_not_kill(kernel, kc):
    km, _ = kernel
    msg_id = kc.execute("sleep 60")
    time.sleep(0.3)
    started = time.monotonic()
    km.signal_kernel(signal.SIGINT)
    reply = shell_reply(kc, msg_id, timeout=5)
    assert time.monotonic() - started < 1.0
    assert reply["content"]["ename"] == "Interrupted"
    km.signal_kernel(signal.SIGINT)  # while idle
    time.sleep(0.2)
    assert km.is_alive()
    reply, _ = run(kc, "1+1")
    assert reply["content"]["status"] == "ok"


# ---------------------------------------------------------------- authentication


def raw_shell_socket(km):
    info = km.get_connection_info()
    context = zmq.Context.instance()
    socket = context.socket(zmq.DEALER)
    socket.linger = 0
    socket.connect(f"{info['transport']}://{info['ip']}:{info['shell_port']}")
    return socket, info


def received(socket, seconds):
    return socket.poll(int(seconds * 1000)) != 0


def test_bad_signature_is_dropped_logged_and_the_kernel_keeps_serving(own_kernel):
    km, kc, log = own_kernel
    socket, info = raw_shell_socket(km)
    try:
        forger = Session(key=b"not-the-connection-key", signature_scheme="hmac-sha256")
        forged = forger.send(socket, "execute_request", {"code": "print forged", "silent": False})
        assert not received(socket, 1.0), "a forged message got an answer"
        # Nothing ran: no iopub traffic for it either.
        while True:
            try:
                msg = kc.get_iopub_msg(timeout=0.2)
            except Exception:
                break
            assert msg["parent_header"].get("msg_id") != forged["header"]["msg_id"]

        # Tampered content under a genuine signature is refused too.
        honest = Session(key=info["key"], signature_scheme="hmac-sha256")
        message = honest.msg("execute_request", {"code": "print original", "silent": False})
        frames = honest.serialize(message)
        frames[-1] = frames[-1].replace(b"original", b"tampered")
        socket.send_multipart(frames)
        assert not received(socket, 0.5)

        # A genuine message is answered, but the same frames replayed are not.
        message = honest.msg("kernel_info_request", {})
        frames = honest.serialize(message)
        socket.send_multipart(frames)
        assert received(socket, 5.0)
        honest.recv(socket)
        socket.send_multipart(frames)
        assert not received(socket, 0.5), "a replayed message got an answer"
    finally:
        socket.close()

    reply, _ = run(kc, "print still here")
    assert reply["content"]["status"] == "ok"
    text = log.read_text()
    assert "dropped a message on shell: signature does not match" in text
    assert "replayed" in text


def test_a_subscriber_that_never_reads_does_not_stall_the_kernel(kernel, kc):
    # ZeroMQ PUB semantics: messages for a slow subscriber are dropped
    # rather than holding up the publisher (ZeroMQ guide, "high-water marks").
    km, _ = kernel
    info = km.get_connection_info()
    stuck = zmq.Context.instance().socket(zmq.SUB)
    stuck.linger = 0
    stuck.rcvhwm = 1
    stuck.setsockopt(zmq.RCVBUF, 4096)
    stuck.setsockopt(zmq.SUBSCRIBE, b"")
    stuck.connect(f"tcp://{info['ip']}:{info['iopub_port']}")
    try:
        time.sleep(0.3)
        line = "print " + "w" * 4000
        started = time.monotonic()
        reply, published = run(kc, "\n".join([line] * 3000), )
        assert reply["content"]["status"] == "ok"
        assert sum(1 for m in published if m["msg_type"] == "stream") == 3000
        reply, _ = run(kc, "1+2")
        assert reply["content"]["status"] == "ok"
        assert time.monotonic() - started < 20
    finally:
        stuck.close()


# ---------------------------------------------------------------- restart and shutdown


def test_restart_starts_a_fresh_process(own_kernel):
    km, kc, _ = own_kernel
    run(kc, "gone = 1")
    before = kernel_pid(km)
    km.restart_kernel(now=False)  # shutdown_request(restart=True), then a new process
    kc.wait_for_ready(timeout=30)
    assert kernel_pid(km) != before
    reply, _ = run(kc, "1")
    assert reply["content"]["execution_count"] == 1
    reply, _ = run(kc, "gone")
    assert reply["content"]["ename"] == "ToyNameError"


@pytest.mark.parametrize("restart", [False, True])
def test_shutdown_replies_then_exits(own_kernel, restart):
    km, kc, _ = own_kernel
    msg_id = kc.shutdown(restart=restart)
    reply = kc.get_control_msg(timeout=TIMEOUT)
    assert reply["parent_header"]["msg_id"] == msg_id
    assert reply["content"] == {"status": "ok", "restart": restart}
    # Protocol, "Kernel shutdown": the kernel exits; a manager restarts it.
    assert wait_dead(km, 3.0)


# ---------------------------------------------------------------- a notebook through nbclient


def test_notebook_runs_through_nbclient():
    notebook = nbformat.v4.new_notebook()
    notebook.cells = [
        nbformat.v4.new_code_cell("print wind report"),
        nbformat.v4.new_code_cell("shear = 30-12\nshear"),
        nbformat.v4.new_code_cell("display"),
    ]
    NotebookClient(notebook, kernel_name=DOUBLE, timeout=30).execute()
    first, second, third = (cell.outputs for cell in notebook.cells)
    assert first[0]["output_type"] == "stream" and first[0]["text"] == "wind report\n"
    assert second[0]["output_type"] == "execute_result" and second[0]["data"]["text/plain"] == "18"
    assert notebook.cells[1].execution_count == 2
    assert third[0]["output_type"] == "display_data" and "image/png" in third[0]["data"]
    nbformat.validate(notebook)


def test_nbclient_reports_a_failing_cell():
    notebook = nbformat.v4.new_notebook()
    notebook.cells = [nbformat.v4.new_code_cell("1/0"), nbformat.v4.new_code_cell("print after")]
    with pytest.raises(CellExecutionError) as failure:
        NotebookClient(notebook, kernel_name=DOUBLE, timeout=30).execute()
    assert "ToyArithmeticError" in str(failure.value)


if __name__ == "__main__":
    sys.exit(pytest.main([__file__, "-v"]))
