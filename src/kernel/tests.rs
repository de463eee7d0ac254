//! End-to-end checks of the kernel over real sockets, with a scripted
//! session standing in for the language. The Python suite under
//! tests/python drives the same kernel with Jupyter's own clients.

use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use serde_json::{json, Value};
use zeromq::{Socket, SocketRecv, SocketSend, ZmqMessage};

use super::connection::{Channel, ConnectionInfo};
use super::session::*;
use super::wire::{Authenticator, Header, Message};
use super::{mime_bundle_to_json, serve};
use crate::mime::MimeBundle;

/// Test double: "value" gives 42, "fail" an error, "boom" panics,
/// "wait" spins until interrupted, "say X" prints X.
struct Scripted;

impl KernelSession for Scripted {
    fn execute(&mut self, code: &str, interrupt: &std::sync::Arc<AtomicBool>) -> ExecuteOutcome {
        match code {
            "value" => ExecuteOutcome::value(MimeBundle::plain("42")),
            "fail" => ExecuteOutcome::failure(KernelError::new(
                "Failure",
                "asked to fail",
                vec!["fail".into()],
            )),
            "boom" => panic!("scripted panic"),
            "wait" => {
                let start = Instant::now();
                while !interrupt.load(Ordering::SeqCst) {
                    if start.elapsed() > Duration::from_secs(20) {
                        return ExecuteOutcome::value(MimeBundle::plain("never interrupted"));
                    }
                    std::thread::sleep(Duration::from_millis(5));
                }
                ExecuteOutcome::failure(KernelError::new("Interrupted", "stopped", vec![]))
            }
            other => match other.strip_prefix("say ") {
                Some(text) => ExecuteOutcome {
                    outputs: vec![Output::Stream {
                        name: StreamName::Stdout,
                        text: format!("{text}\n"),
                    }],
                    ..Default::default()
                },
                None => ExecuteOutcome::default(),
            },
        }
    }

    fn complete(&self, code: &str, cursor_pos: usize) -> Completion {
        // Completes the whole text before the cursor to "value"; positions
        // deliberately past the end test the kernel's clamping.
        let _ = code;
        Completion {
            matches: vec!["value".into()],
            cursor_start: 0,
            cursor_end: cursor_pos + 100,
        }
    }

    fn inspect(&self, _code: &str, _cursor_pos: usize, _detail_level: u8) -> Option<MimeBundle> {
        Some(MimeBundle::plain("help text"))
    }

    fn is_complete(&self, code: &str) -> IsComplete {
        if code.ends_with('(') {
            IsComplete::Incomplete {
                indent: "  ".into(),
            }
        } else {
            IsComplete::Complete
        }
    }

    fn language_info(&self) -> LanguageInfo {
        LanguageInfo {
            name: "scripted".into(),
            version: "0".into(),
            mimetype: "text/plain".into(),
            file_extension: ".txt".into(),
            pygments_lexer: None,
            codemirror_mode: None,
        }
    }

    fn banner(&self) -> String {
        "scripted test session".into()
    }
}

fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

fn connection(key: &str) -> ConnectionInfo {
    let text = json!({
        "transport": "tcp", "ip": "127.0.0.1", "key": key, "signature_scheme": "hmac-sha256",
        "shell_port": free_port(), "iopub_port": free_port(), "stdin_port": free_port(),
        "control_port": free_port(), "hb_port": free_port(),
    });
    ConnectionInfo::parse(&text.to_string()).unwrap()
}

struct Client {
    auth: Authenticator,
    shell: zeromq::DealerSocket,
    control: zeromq::DealerSocket,
    iopub: zeromq::SubSocket,
}

impl Client {
    async fn connect(info: &ConnectionInfo) -> Self {
        let mut shell = zeromq::DealerSocket::new();
        shell.connect(&info.endpoint(Channel::Shell)).await.unwrap();
        let mut control = zeromq::DealerSocket::new();
        control
            .connect(&info.endpoint(Channel::Control))
            .await
            .unwrap();
        let mut iopub = zeromq::SubSocket::new();
        iopub.connect(&info.endpoint(Channel::Iopub)).await.unwrap();
        iopub.subscribe("").await.unwrap();
        Self {
            auth: Authenticator::new(&info.key),
            shell,
            control,
            iopub,
        }
    }

    fn frames(&self, msg_type: &str, content: Value) -> (String, Vec<Vec<u8>>) {
        let header = Header::new(msg_type, "test-client");
        let id = header.msg_id.clone();
        (
            id,
            self.auth
                .encode(&[], &header, &json!({}), &json!({}), &content),
        )
    }

    async fn send(socket: &mut zeromq::DealerSocket, frames: Vec<Vec<u8>>) {
        let frames: Vec<bytes::Bytes> = frames.into_iter().map(bytes::Bytes::from).collect();
        socket
            .send(ZmqMessage::try_from(frames).unwrap())
            .await
            .unwrap();
    }

    async fn request(&mut self, msg_type: &str, content: Value) -> String {
        let (id, frames) = self.frames(msg_type, content);
        Self::send(&mut self.shell, frames).await;
        id
    }

    async fn receive(
        auth: &Authenticator,
        socket: &mut impl SocketRecv,
        wait: Duration,
    ) -> Option<Message> {
        let received = tokio::time::timeout(wait, socket.recv())
            .await
            .ok()?
            .unwrap();
        let frames = received
            .into_vec()
            .into_iter()
            .map(|frame| frame.to_vec())
            .collect();
        Some(auth.decode(frames).unwrap())
    }

    async fn shell_reply(&mut self) -> Message {
        Self::receive(&self.auth, &mut self.shell, Duration::from_secs(10))
            .await
            .expect("a shell reply")
    }

    /// Iopub messages of one request up to and including its idle status.
    async fn iopub_until_idle(&mut self, parent: &str) -> Vec<Message> {
        let mut seen = Vec::new();
        loop {
            let message = Self::receive(&self.auth, &mut self.iopub, Duration::from_secs(10))
                .await
                .expect("iopub traffic");
            if message.parent_header["msg_id"] != parent {
                continue;
            }
            let idle =
                message.msg_type() == "status" && message.content["execution_state"] == "idle";
            seen.push(message);
            if idle {
                return seen;
            }
        }
    }
}

fn types(messages: &[Message]) -> Vec<String> {
    messages
        .iter()
        .map(|message| message.msg_type().to_string())
        .collect()
}

#[test]
fn serves_requests_survives_panics_and_refuses_bad_signatures() {
    let info = connection("a-test-key");
    let kernel_info = info.clone();
    let kernel = std::thread::spawn(move || serve(kernel_info, Box::new(Scripted)));
    let runtime = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .unwrap();
    runtime.block_on(async {
        let mut client = Client::connect(&info).await;
        // Repeat kernel_info until iopub shows the subscription is live,
        // exactly as Jupyter's clients do.
        let mut ready = false;
        for _ in 0..50 {
            let id = client.request("kernel_info_request", json!({})).await;
            let reply = client.shell_reply().await;
            assert_eq!(reply.msg_type(), "kernel_info_reply");
            assert_eq!(reply.content["protocol_version"], "5.3");
            assert_eq!(reply.content["language_info"]["name"], "scripted");
            if let Some(status) =
                Client::receive(&client.auth, &mut client.iopub, Duration::from_millis(200)).await
            {
                assert_eq!(status.parent_header["msg_id"], id);
                ready = true;
                break;
            }
        }
        assert!(ready, "no iopub traffic after kernel_info");
        let _ = Client::receive(&client.auth, &mut client.iopub, Duration::from_millis(200)).await;

        let id = client
            .request("execute_request", json!({"code": "value"}))
            .await;
        let reply = client.shell_reply().await;
        assert_eq!(reply.content["status"], "ok");
        assert_eq!(reply.content["execution_count"], 1);
        let published = client.iopub_until_idle(&id).await;
        assert_eq!(
            types(&published),
            ["status", "execute_input", "execute_result", "status"]
        );
        assert_eq!(published[2].content["data"]["text/plain"], "42");

        let id = client
            .request("execute_request", json!({"code": "boom"}))
            .await;
        let reply = client.shell_reply().await;
        assert_eq!(reply.content["status"], "error");
        assert_eq!(reply.content["execution_count"], 2);
        assert_eq!(reply.content["ename"], "InternalError");
        let published = client.iopub_until_idle(&id).await;
        assert_eq!(
            types(&published),
            ["status", "execute_input", "error", "status"]
        );

        // A message signed with another key is dropped without any answer.
        let (_, mut forged) = client.frames("execute_request", json!({"code": "say forged"}));
        let wrong = Authenticator::new("not the key");
        let header: Vec<u8> = forged[2].clone();
        let signature = wrong.sign([&header, &forged[3], &forged[4], &forged[5]]);
        forged[1] = signature.into_bytes();
        Client::send(&mut client.shell, forged).await;
        assert!(
            Client::receive(&client.auth, &mut client.shell, Duration::from_millis(500))
                .await
                .is_none()
        );

        // The kernel still serves, and the panic did not cost the session.
        client
            .request("execute_request", json!({"code": "say hi"}))
            .await;
        let reply = client.shell_reply().await;
        assert_eq!(reply.content["status"], "ok");
        assert_eq!(reply.content["execution_count"], 3);

        // Completion positions beyond the code are clamped (code points).
        client
            .request("complete_request", json!({"code": "vå", "cursor_pos": 2}))
            .await;
        let reply = client.shell_reply().await;
        assert_eq!(reply.content["cursor_start"], 0);
        assert_eq!(reply.content["cursor_end"], 2);

        // A long cell is interrupted from the control channel.
        let id = client
            .request("execute_request", json!({"code": "wait"}))
            .await;
        tokio::time::sleep(Duration::from_millis(100)).await;
        let started = Instant::now();
        let (_, interrupt) = client.frames("interrupt_request", json!({}));
        Client::send(&mut client.control, interrupt).await;
        let reply = Client::receive(&client.auth, &mut client.control, Duration::from_secs(5))
            .await
            .unwrap();
        assert_eq!(reply.msg_type(), "interrupt_reply");
        let reply = client.shell_reply().await;
        assert_eq!(reply.parent_header["msg_id"], id);
        assert_eq!(reply.content["ename"], "Interrupted");
        assert!(started.elapsed() < Duration::from_secs(1));

        let (_, shutdown) = client.frames("shutdown_request", json!({"restart": false}));
        Client::send(&mut client.control, shutdown).await;
        let reply = Client::receive(&client.auth, &mut client.control, Duration::from_secs(5))
            .await
            .unwrap();
        assert_eq!(reply.msg_type(), "shutdown_reply");
        assert_eq!(reply.content["restart"], false);
    });
    kernel.join().unwrap().unwrap();
}

#[test]
fn bundles_become_data_objects() {
    let mut bundle = MimeBundle::plain("a picture");
    bundle.insert_binary("image/png", vec![0x89, b'P', b'N', b'G']);
    bundle.insert_text("application/json", r#"{"speed": 12.5}"#);
    bundle.insert_text("application/geo+json", "not json at all");
    let data = mime_bundle_to_json(&bundle);
    // RFC 4648 section 4: 89 50 4E 47 encodes as "iVBORw==".
    assert_eq!(data["image/png"], "iVBORw==");
    assert_eq!(data["application/json"], json!({"speed": 12.5}));
    assert_eq!(data["application/geo+json"], "not json at all");
    assert_eq!(data["text/plain"], "a picture");
}
