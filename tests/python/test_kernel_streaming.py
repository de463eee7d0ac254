"""Notebook output as Jupyter front ends expect it, seen from a real client
(jupyter_client): each statement's result published as it completes, a
progress display updated in place by display id, warnings on stderr,
pictures sized through display metadata, tables in three forms.

Message names, `transient.display_id` and update_display_data follow the
Jupyter messaging protocol 5.3 ("Display Data", "Update Display Data")."""

from __future__ import annotations

import base64
import json
import subprocess
from queue import Empty

import pytest
from jupyter_client.manager import start_new_kernel

from kernel_env import baroc_binary


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    root = tmp_path_factory.mktemp("streaming")
    subprocess.run([str(baroc_binary()), "demo", "--output", str(root)], check=True, capture_output=True)
    files = sorted(root.glob("*.nc"))
    assert files, "baroc demo wrote no NetCDF file"
    return files[0]


def start(env_extra=None):
    import os

    env = dict(os.environ)
    env.update(env_extra or {})
    return start_new_kernel(kernel_name="baroc", startup_timeout=60, env=env)


@pytest.fixture()
def kernel():
    km, kc = start()
    yield kc
    kc.stop_channels()
    km.shutdown_kernel(now=True)


@pytest.fixture()
def eager_progress_kernel():
    # Progress shown from the first statement on, so a short cell shows it.
    km, kc = start({"BAROC_PROGRESS_AFTER_MS": "0"})
    yield kc
    kc.stop_channels()
    km.shutdown_kernel(now=True)


def messages_of(kc, msg_id, timeout=120):
    """The iopub messages of one request, up to its idle status."""
    messages = []
    while True:
        msg = kc.get_iopub_msg(timeout=timeout)
        if msg["parent_header"].get("msg_id") != msg_id:
            continue
        messages.append(msg)
        if msg["msg_type"] == "status" and msg["content"]["execution_state"] == "idle":
            return messages


def shell_reply(kc, msg_id, timeout=120):
    reply = kc.get_shell_msg(timeout=timeout)
    while reply["parent_header"].get("msg_id") != msg_id:
        reply = kc.get_shell_msg(timeout=timeout)
    return reply["content"]


def test_a_result_arrives_while_the_cell_is_still_running(kernel, case):
    # The first statement's value must reach the client before the long
    # rest of the cell is over: we see it, then find the cell still busy
    # (no reply yet), then stop the cell.
    long_rest = "\n".join(f"let s{k} = smooth(temperature, 900 km)" for k in range(400))
    msg_id = kernel.execute(f'open "{case}"\nthickness(1000 hPa to 500 hPa) as dam\n{long_rest}\n1')
    seen = []
    while True:
        msg = kernel.get_iopub_msg(timeout=120)
        if msg["parent_header"].get("msg_id") != msg_id:
            continue
        seen.append(msg["msg_type"])
        if msg["msg_type"] == "display_data":
            break
        assert msg["msg_type"] != "execute_result", "the cell ended before its first result was shown"
    with pytest.raises(Empty):
        kernel.get_shell_msg(timeout=0.05)
    kernel.control_channel.send(kernel.session.msg("interrupt_request", {}))
    reply = shell_reply(kernel, msg_id)
    assert reply["status"] == "error" and reply["ename"] == "KeyboardInterrupt"
    rest = [m["msg_type"] for m in messages_of(kernel, msg_id)]
    assert "execute_result" not in rest and "error" in rest
    assert seen[0] == "status" and "execute_input" in seen


def test_a_long_cell_shows_progress_that_updates_in_place(eager_progress_kernel, case):
    kc = eager_progress_kernel
    cell = f'open "{case}"\n' + "\n".join(f"let s{k} = smooth(temperature, 600 km)" for k in range(6)) + "\n42"
    msg_id = kc.execute(cell)
    reply = shell_reply(kc, msg_id)
    assert reply["status"] == "ok"
    messages = messages_of(kc, msg_id)
    kinds = [m["msg_type"] for m in messages]
    shown = [m for m in messages if m["msg_type"] == "display_data" and m["content"]["transient"].get("display_id")]
    assert len(shown) == 1, kinds
    display_id = shown[0]["content"]["transient"]["display_id"]
    assert "running statement" in shown[0]["content"]["data"]["text/plain"]
    assert "<progress" in shown[0]["content"]["data"]["text/html"]
    updates = [m for m in messages if m["msg_type"] == "update_display_data"]
    assert updates and all(u["content"]["transient"]["display_id"] == display_id for u in updates)
    # The display ends as a summary, before the cell's own result.
    summary = updates[-1]["content"]["data"]["text/plain"]
    assert summary.startswith("ran 8 statements in "), summary
    assert kinds.index("update_display_data") > kinds.index("display_data")
    assert max(i for i, k in enumerate(kinds) if k == "update_display_data") < kinds.index("execute_result")
    result = [m for m in messages if m["msg_type"] == "execute_result"][0]["content"]["data"]["text/plain"]
    assert result == "42"


def test_a_quick_cell_shows_no_progress(kernel):
    msg_id = kernel.execute("1 + 2")
    shell_reply(kernel, msg_id)
    kinds = [m["msg_type"] for m in messages_of(kernel, msg_id)]
    assert kinds == ["status", "execute_input", "execute_result", "status"], kinds


def test_warnings_go_to_stderr_and_results_stay_in_order(kernel):
    # Writing a layer top-down draws the checker's warning (on stderr,
    # before anything runs); print goes to stdout between the two values.
    msg_id = kernel.execute('let upside_down = 500 hPa to 1000 hPa\n1 + 1\nprint("between")\n2 + 2')
    assert shell_reply(kernel, msg_id)["status"] == "ok"
    messages = [m for m in messages_of(kernel, msg_id) if m["msg_type"] not in ("status", "execute_input")]
    order = [(m["msg_type"], m["content"].get("name")) for m in messages]
    assert order == [("stream", "stderr"), ("display_data", None), ("stream", "stdout"), ("execute_result", None)], order
    assert "top down" in messages[0]["content"]["text"]
    assert messages[1]["content"]["data"]["text/plain"] == "2"
    assert messages[2]["content"]["text"] == "between\n"
    assert messages[3]["content"]["data"]["text/plain"] == "4"


def test_clear_output_is_sent_in_order(kernel):
    msg_id = kernel.execute('print("old")\nclear_output() with wait true\nprint("new")')
    assert shell_reply(kernel, msg_id)["status"] == "ok"
    messages = [m for m in messages_of(kernel, msg_id) if m["msg_type"] not in ("status", "execute_input")]
    assert [m["msg_type"] for m in messages] == ["stream", "clear_output", "stream"]
    assert messages[1]["content"] == {"wait": True}


def test_pictures_carry_their_size_and_tables_three_forms(kernel, case):
    msg_id = kernel.execute(
        f'open "{case}"\n'
        "map(thickness(1000 hPa to 500 hPa)) with width 640, height 480, dpi 192\n"
        "thickness(1000 hPa to 500 hPa) at point(51.5 north, 31 west)"
    )
    assert shell_reply(kernel, msg_id)["status"] == "ok"
    messages = messages_of(kernel, msg_id)
    figure = [m for m in messages if m["msg_type"] == "display_data"][0]["content"]
    assert {"image/png", "image/svg+xml", "text/plain"} <= set(figure["data"])
    # The size front ends lay out is the figure's, in CSS pixels, while the
    # PNG holds twice as many pixels each way at 192 dpi (96 dpi = 1 CSS px).
    assert figure["metadata"]["image/png"] == {"width": 640, "height": 480}
    assert figure["metadata"]["image/svg+xml"] == {"width": 640, "height": 480}
    png = base64.b64decode(figure["data"]["image/png"])
    assert int.from_bytes(png[16:20], "big") == 1280 and int.from_bytes(png[20:24], "big") == 960
    table = [m for m in messages if m["msg_type"] == "execute_result"][0]["content"]["data"]
    assert {"text/html", "text/plain", "application/json"} <= set(table), set(table)
    assert "<table" in table["text/html"]
    json.dumps(table["application/json"])  # a JSON value, not a string of it
    assert isinstance(table["application/json"], (dict, list))
