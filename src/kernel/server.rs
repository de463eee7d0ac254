//! The running kernel: five sockets, one session, the request handlers.
//!
//! Layout (messaging protocol 5.3, "Messaging in Jupyter"):
//! - heartbeat: ROUTER that echoes every message back unchanged;
//! - shell: a reader task that authenticates messages and queues them (an
//!   interrupt_request on shell is answered at once, not queued), and a
//!   processor task that handles the queue strictly in order;
//! - control: one task handling kernel_info, interrupt and shutdown at once,
//!   even while a cell runs;
//! - iopub: PUB socket shared behind an async lock, so a publish finishes
//!   before the reply that follows it is sent;
//! - stdin: bound and drained; the session never asks for input.
//!
//! Every request is wrapped in status busy / idle on iopub with the request
//! as parent, kernel_info included: clients resend kernel_info until they see
//! iopub traffic, which is how they know their subscription is live.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::Duration;

use serde_json::{json, Map, Value};
use tokio::sync::{mpsc, Mutex, Notify};

use super::connection::{Channel, ConnectionInfo};
use super::history::{History, HistoryQuery};
use super::session::{
    codepoint_len, Completion, ExecuteOutcome, HelpLink, IsComplete, KernelError, KernelSession,
    LanguageInfo, Output,
};
use super::transport::{bind_publisher, bind_router, Publisher, RouterReceiver, RouterSender};
use super::wire::{Authenticator, Header, Message, PROTOCOL_VERSION};
use super::worker::{CallFailure, Worker};
use super::{display_metadata, log, mime_bundle_to_json, KernelFailure};

/// Name of the implementation in kernel_info_reply.
const IMPLEMENTATION: &str = "baroc";

/// Pause after a socket error before trying again, so a broken socket
/// cannot turn a loop into a busy spin.
const ERROR_BACKOFF: Duration = Duration::from_millis(10);

/// Read the connection file, build the session and serve until a
/// shutdown_request. The session is built once per process: on a restart
/// request the kernel replies and exits, and the Jupyter manager starts a
/// new process (messaging protocol, "Kernel shutdown").
pub fn run_kernel(
    connection_file: &std::path::Path,
    make_session: impl Fn() -> Box<dyn KernelSession>,
) -> Result<(), KernelFailure> {
    let info = ConnectionInfo::from_file(connection_file)?;
    serve(info, make_session())
}

/// Serve one session on the sockets `info` describes; returns after a
/// shutdown_request has been answered.
pub fn serve(info: ConnectionInfo, session: Box<dyn KernelSession>) -> Result<(), KernelFailure> {
    let runtime = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|error| KernelFailure::Runtime(error.to_string()))?;
    runtime.block_on(serve_async(info, session))
}

struct Facts {
    language_info: LanguageInfo,
    banner: String,
    help_links: Vec<HelpLink>,
}

struct Kernel {
    auth: Authenticator,
    /// Session id in the headers of everything the kernel sends.
    session_id: String,
    info: ConnectionInfo,
    facts: Facts,
    iopub: Mutex<Publisher>,
    interrupt: Arc<AtomicBool>,
    worker: Worker,
    shutdown: Notify,
    shutting_down: AtomicBool,
}

async fn serve_async(
    info: ConnectionInfo,
    session: Box<dyn KernelSession>,
) -> Result<(), KernelFailure> {
    let sigint = SigintListener::install();
    // Static facts are read once, so kernel_info never waits for a busy cell.
    let facts = Facts {
        language_info: session.language_info(),
        banner: session.banner(),
        help_links: session.help_links(),
    };

    let bind_error = |channel: Channel, endpoint: String| {
        move |error: super::transport::TransportError| KernelFailure::Bind {
            channel: channel.name(),
            endpoint,
            reason: error.0,
        }
    };
    let endpoint = |channel| info.endpoint(channel);
    let (hb_send, hb_recv) = bind_router(&endpoint(Channel::Heartbeat))
        .await
        .map_err(bind_error(Channel::Heartbeat, endpoint(Channel::Heartbeat)))?;
    let iopub = bind_publisher(&endpoint(Channel::Iopub))
        .await
        .map_err(bind_error(Channel::Iopub, endpoint(Channel::Iopub)))?;
    let (control_send, control_recv) = bind_router(&endpoint(Channel::Control))
        .await
        .map_err(bind_error(Channel::Control, endpoint(Channel::Control)))?;
    let (shell_send, shell_recv) = bind_router(&endpoint(Channel::Shell))
        .await
        .map_err(bind_error(Channel::Shell, endpoint(Channel::Shell)))?;
    let (_stdin_send, stdin_recv) = bind_router(&endpoint(Channel::Stdin))
        .await
        .map_err(bind_error(Channel::Stdin, endpoint(Channel::Stdin)))?;

    let worker =
        Worker::start(session).map_err(|error| KernelFailure::Runtime(error.to_string()))?;
    let auth = Authenticator::new(&info.key);
    if !auth.signs() {
        log("the connection file has an empty key: messages are neither signed nor checked");
    }
    let kernel = Arc::new(Kernel {
        auth,
        session_id: super::wire::new_id(),
        info,
        facts,
        iopub: Mutex::new(iopub),
        interrupt: Arc::new(AtomicBool::new(false)),
        worker,
        shutdown: Notify::new(),
        shutting_down: AtomicBool::new(false),
    });
    log(format!(
        "listening: shell {}, control {}, iopub {}, stdin {}, heartbeat {}",
        kernel.info.endpoint(Channel::Shell),
        kernel.info.endpoint(Channel::Control),
        kernel.info.endpoint(Channel::Iopub),
        kernel.info.endpoint(Channel::Stdin),
        kernel.info.endpoint(Channel::Heartbeat),
    ));
    kernel
        .publish(None, "status", json!({"execution_state": "starting"}))
        .await;

    let (queue_send, queue_recv) = mpsc::unbounded_channel::<Message>();
    let tasks = vec![
        tokio::spawn(heartbeat(hb_send, hb_recv)),
        tokio::spawn(drain_stdin(kernel.clone(), stdin_recv)),
        tokio::spawn(control_loop(kernel.clone(), control_send, control_recv)),
        tokio::spawn(shell_reader(
            kernel.clone(),
            shell_send.clone(),
            shell_recv,
            queue_send,
        )),
        tokio::spawn(shell_processor(kernel.clone(), shell_send, queue_recv)),
        tokio::spawn(interrupt_on_sigint(kernel.clone(), sigint)),
    ];

    kernel.shutdown.notified().await;
    // Let a running cell notice that it should stop; the process may end
    // before it does, which is fine: the session is being thrown away.
    kernel.interrupt.store(true, Ordering::SeqCst);
    for task in tasks {
        task.abort();
    }
    log("shut down");
    Ok(())
}

impl Kernel {
    async fn publish(&self, parent: Option<&Message>, msg_type: &str, content: Value) {
        let topic = format!("kernel.{}.{msg_type}", self.session_id).into_bytes();
        let header = Header::new(msg_type, &self.session_id);
        let parent_header = parent
            .map(Message::header_value)
            .unwrap_or_else(|| json!({}));
        let frames = self
            .auth
            .encode(&[topic], &header, &parent_header, &json!({}), &content);
        if let Err(error) = self.iopub.lock().await.send(frames).await {
            log(format!("cannot publish {msg_type} on iopub: {error}"));
        }
    }

    async fn status(&self, parent: &Message, state: &str) {
        self.publish(Some(parent), "status", json!({"execution_state": state}))
            .await;
    }

    async fn reply(
        &self,
        sender: &mut RouterSender,
        request: &Message,
        msg_type: &str,
        content: Value,
    ) {
        let header = Header::new(msg_type, &self.session_id);
        let frames = self.auth.encode(
            &request.identities,
            &header,
            &request.header_value(),
            &json!({}),
            &content,
        );
        if let Err(error) = sender.send(frames).await {
            log(format!("cannot send {msg_type}: {error}"));
        }
    }

    fn kernel_info_content(&self) -> Value {
        let language = &self.facts.language_info;
        let mut language_info = json!({
            "name": language.name,
            "version": language.version,
            "mimetype": language.mimetype,
            "file_extension": language.file_extension,
        });
        if let Some(lexer) = &language.pygments_lexer {
            language_info["pygments_lexer"] = json!(lexer);
        }
        if let Some(mode) = &language.codemirror_mode {
            language_info["codemirror_mode"] = json!(mode);
        }
        let help_links: Vec<Value> = self
            .facts
            .help_links
            .iter()
            .map(|link| json!({"text": link.text, "url": link.url}))
            .collect();
        json!({
            "status": "ok",
            "protocol_version": PROTOCOL_VERSION,
            "implementation": IMPLEMENTATION,
            "implementation_version": env!("CARGO_PKG_VERSION"),
            "language_info": language_info,
            "banner": self.facts.banner,
            "debugger": false,
            "help_links": help_links,
        })
    }

    fn interrupt(&self) {
        self.interrupt.store(true, Ordering::SeqCst);
    }

    /// Requests any channel answers the same way. Returns false when
    /// `request` is none of them.
    async fn handle_common(&self, sender: &mut RouterSender, request: &Message) -> bool {
        match request.msg_type() {
            "kernel_info_request" => {
                self.reply(
                    sender,
                    request,
                    "kernel_info_reply",
                    self.kernel_info_content(),
                )
                .await
            }
            "interrupt_request" => {
                self.interrupt();
                self.reply(sender, request, "interrupt_reply", json!({"status": "ok"}))
                    .await;
            }
            "connect_request" => {
                let content = json!({
                    "status": "ok",
                    "shell_port": self.info.shell_port,
                    "iopub_port": self.info.iopub_port,
                    "stdin_port": self.info.stdin_port,
                    "hb_port": self.info.hb_port,
                    "control_port": self.info.control_port,
                });
                self.reply(sender, request, "connect_reply", content).await;
            }
            "shutdown_request" => {
                let restart = request
                    .content
                    .get("restart")
                    .and_then(Value::as_bool)
                    .unwrap_or(false);
                let content = json!({"status": "ok", "restart": restart});
                self.reply(sender, request, "shutdown_reply", content.clone())
                    .await;
                // Also on iopub, so every client learns the kernel is going.
                self.publish(Some(request), "shutdown_reply", content).await;
                self.shutting_down.store(true, Ordering::SeqCst);
            }
            _ => return false,
        }
        true
    }

    /// Answer a request type this kernel does not implement with an error
    /// reply (so the client does not wait forever); other messages are
    /// logged and dropped.
    async fn refuse(&self, sender: &mut RouterSender, request: &Message, channel: Channel) {
        let msg_type = request.msg_type();
        match msg_type.strip_suffix("_request") {
            Some(stem) => {
                let content = json!({
                    "status": "error",
                    "ename": "UnsupportedRequest",
                    "evalue": format!("the Baroc kernel does not handle {msg_type} on the {} channel", channel.name()),
                    "traceback": [],
                });
                self.reply(sender, request, &format!("{stem}_reply"), content)
                    .await;
            }
            None => log(format!(
                "ignored a {msg_type} message on {}",
                channel.name()
            )),
        }
    }

    fn finish_if_shutting_down(&self) -> bool {
        if self.shutting_down.load(Ordering::SeqCst) {
            self.shutdown.notify_one();
            true
        } else {
            false
        }
    }
}

/// Decode one message, logging (never executing) what fails to authenticate.
fn accept(kernel: &Kernel, channel: Channel, frames: Vec<Vec<u8>>) -> Option<Message> {
    match kernel.auth.decode(frames) {
        Ok(message) => Some(message),
        Err(error) => {
            log(format!("dropped a message on {}: {error}", channel.name()));
            None
        }
    }
}

async fn heartbeat(mut sender: RouterSender, mut receiver: RouterReceiver) {
    loop {
        match receiver.recv().await {
            Ok(frames) => {
                if let Err(error) = sender.send(frames).await {
                    log(format!("heartbeat echo failed: {error}"));
                }
            }
            Err(error) => {
                log(format!("heartbeat receive failed: {error}"));
                tokio::time::sleep(ERROR_BACKOFF).await;
            }
        }
    }
}

async fn drain_stdin(kernel: Arc<Kernel>, mut receiver: RouterReceiver) {
    loop {
        match receiver.recv().await {
            Ok(frames) => {
                if let Some(message) = accept(&kernel, Channel::Stdin, frames) {
                    log(format!(
                        "ignored a {} message on stdin: no input was asked for",
                        message.msg_type()
                    ));
                }
            }
            Err(_) => tokio::time::sleep(ERROR_BACKOFF).await,
        }
    }
}

/// SIGINT turned into an interrupt. Installed first thing, so from then on
/// SIGINT (Ctrl-C in a terminal, or a manager that signals) never ends the
/// process; it interrupts the running cell like an interrupt_request.
struct SigintListener {
    #[cfg(unix)]
    signal: tokio::signal::unix::Signal,
}

impl SigintListener {
    fn install() -> Option<Self> {
        #[cfg(unix)]
        {
            use tokio::signal::unix::{signal, SignalKind};
            match signal(SignalKind::interrupt()) {
                Ok(signal) => Some(Self { signal }),
                Err(error) => {
                    log(format!(
                        "cannot handle SIGINT ({error}); it will end the kernel"
                    ));
                    None
                }
            }
        }
        #[cfg(not(unix))]
        {
            Some(Self {})
        }
    }

    /// Wait for the next SIGINT; false when no more can arrive.
    async fn next(&mut self) -> bool {
        #[cfg(unix)]
        {
            self.signal.recv().await.is_some()
        }
        #[cfg(not(unix))]
        {
            tokio::signal::ctrl_c().await.is_ok()
        }
    }
}

async fn interrupt_on_sigint(kernel: Arc<Kernel>, listener: Option<SigintListener>) {
    let Some(mut listener) = listener else {
        return;
    };
    while listener.next().await {
        log("SIGINT received: interrupting the running cell");
        kernel.interrupt();
    }
}

async fn control_loop(kernel: Arc<Kernel>, mut sender: RouterSender, mut receiver: RouterReceiver) {
    loop {
        let frames = match receiver.recv().await {
            Ok(frames) => frames,
            Err(error) => {
                log(format!("control receive failed: {error}"));
                tokio::time::sleep(ERROR_BACKOFF).await;
                continue;
            }
        };
        let Some(request) = accept(&kernel, Channel::Control, frames) else {
            continue;
        };
        kernel.status(&request, "busy").await;
        if !kernel.handle_common(&mut sender, &request).await {
            kernel.refuse(&mut sender, &request, Channel::Control).await;
        }
        kernel.status(&request, "idle").await;
        if kernel.finish_if_shutting_down() {
            return;
        }
    }
}

async fn shell_reader(
    kernel: Arc<Kernel>,
    mut sender: RouterSender,
    mut receiver: RouterReceiver,
    queue: mpsc::UnboundedSender<Message>,
) {
    loop {
        let frames = match receiver.recv().await {
            Ok(frames) => frames,
            Err(error) => {
                log(format!("shell receive failed: {error}"));
                tokio::time::sleep(ERROR_BACKOFF).await;
                continue;
            }
        };
        let Some(request) = accept(&kernel, Channel::Shell, frames) else {
            continue;
        };
        if request.msg_type() == "interrupt_request" {
            // Answered at once: queued behind the running cell it would be useless.
            kernel.status(&request, "busy").await;
            kernel.handle_common(&mut sender, &request).await;
            kernel.status(&request, "idle").await;
            continue;
        }
        if queue.send(request).is_err() {
            return;
        }
    }
}

/// State of the shell processor: only it touches these.
struct Shell {
    execution_count: u64,
    history: History,
    queue: mpsc::UnboundedReceiver<Message>,
    /// Messages taken off the queue while aborting, to handle next.
    pending: std::collections::VecDeque<Message>,
}

async fn shell_processor(
    kernel: Arc<Kernel>,
    mut sender: RouterSender,
    queue: mpsc::UnboundedReceiver<Message>,
) {
    let mut shell = Shell {
        execution_count: 0,
        history: History::default(),
        queue,
        pending: Default::default(),
    };
    loop {
        let request = match shell.pending.pop_front() {
            Some(request) => request,
            None => match shell.queue.recv().await {
                Some(request) => request,
                None => return,
            },
        };
        kernel.status(&request, "busy").await;
        handle_shell(&kernel, &mut shell, &mut sender, &request).await;
        kernel.status(&request, "idle").await;
        if kernel.finish_if_shutting_down() {
            return;
        }
    }
}

/// After a failed cell with stop_on_error, the cells queued behind it are
/// not run ("Run all" stops at the first failure). Only what arrived before
/// the failure was answered counts as queued: called before the failed
/// cell's reply goes out, so a client that sends after seeing the error
/// never has its request skipped. Returns the skipped requests.
async fn take_queued_cells(shell: &mut Shell) -> Vec<Message> {
    // Give the reader a turn to queue what has already arrived.
    tokio::task::yield_now().await;
    while let Ok(request) = shell.queue.try_recv() {
        shell.pending.push_back(request);
    }
    let (cells, others): (Vec<Message>, Vec<Message>) = shell
        .pending
        .drain(..)
        .partition(|request| request.msg_type() == "execute_request");
    shell.pending = others.into();
    cells
}

async fn skip_cells(
    kernel: &Kernel,
    shell: &Shell,
    sender: &mut RouterSender,
    cells: Vec<Message>,
) {
    for request in cells {
        kernel.status(&request, "busy").await;
        // An error reply, as protocol 5.1 and later prefer over "aborted".
        let content = json!({
            "status": "error",
            "ename": "CellSkipped",
            "evalue": "not run because an earlier cell failed",
            "traceback": [],
            "execution_count": shell.execution_count,
        });
        kernel
            .reply(sender, &request, "execute_reply", content)
            .await;
        kernel.status(&request, "idle").await;
    }
}

/// Handle one shell request.
async fn handle_shell(
    kernel: &Kernel,
    shell: &mut Shell,
    sender: &mut RouterSender,
    request: &Message,
) {
    let content = &request.content;
    let code = content
        .get("code")
        .and_then(Value::as_str)
        .unwrap_or("")
        .to_string();
    match request.msg_type() {
        "execute_request" => execute(kernel, shell, sender, request).await,
        "complete_request" => {
            let cursor = cursor_position(content, &code);
            let answer = kernel
                .worker
                .run(move |session| session.complete(&code, cursor))
                .await;
            let reply = match answer {
                Ok(completion) => {
                    complete_content(completion, codepoint_len(&request_code(request)))
                }
                Err(failure) => failure_reply(failure),
            };
            kernel.reply(sender, request, "complete_reply", reply).await;
        }
        "inspect_request" => {
            let cursor = cursor_position(content, &code);
            let detail = content
                .get("detail_level")
                .and_then(Value::as_u64)
                .unwrap_or(0)
                .min(255) as u8;
            let answer = kernel
                .worker
                .run(move |session| session.inspect(&code, cursor, detail))
                .await;
            let reply = match answer {
                Ok(Some(bundle)) => json!({
                    "status": "ok", "found": true, "data": mime_bundle_to_json(&bundle), "metadata": {},
                }),
                Ok(None) => json!({"status": "ok", "found": false, "data": {}, "metadata": {}}),
                Err(failure) => failure_reply(failure),
            };
            kernel.reply(sender, request, "inspect_reply", reply).await;
        }
        "is_complete_request" => {
            let answer = kernel
                .worker
                .run(move |session| session.is_complete(&code))
                .await;
            let reply = match answer {
                Ok(IsComplete::Complete) => json!({"status": "complete"}),
                Ok(IsComplete::Incomplete { indent }) => {
                    json!({"status": "incomplete", "indent": indent})
                }
                Ok(IsComplete::Invalid) => json!({"status": "invalid"}),
                Ok(IsComplete::Unknown) => json!({"status": "unknown"}),
                Err(failure) => failure_reply(failure),
            };
            kernel
                .reply(sender, request, "is_complete_reply", reply)
                .await;
        }
        "history_request" => {
            let reply = match HistoryQuery::from_content(content) {
                Ok(query) => {
                    let output = content
                        .get("output")
                        .and_then(Value::as_bool)
                        .unwrap_or(false);
                    json!({"status": "ok", "history": shell.history.reply_entries(&query, output)})
                }
                Err(reason) => json!({
                    "status": "error", "ename": "InvalidHistoryRequest", "evalue": reason, "traceback": [],
                }),
            };
            kernel.reply(sender, request, "history_reply", reply).await;
        }
        "comm_info_request" => {
            kernel
                .reply(
                    sender,
                    request,
                    "comm_info_reply",
                    json!({"status": "ok", "comms": {}}),
                )
                .await;
        }
        "comm_open" => {
            // No comm targets exist; closing tells the front end so at once.
            let comm_id = content.get("comm_id").cloned().unwrap_or(Value::Null);
            kernel
                .publish(
                    Some(request),
                    "comm_close",
                    json!({"comm_id": comm_id, "data": {}}),
                )
                .await;
        }
        "comm_msg" | "comm_close" => {}
        _ => {
            if !kernel.handle_common(sender, request).await {
                kernel.refuse(sender, request, Channel::Shell).await;
            }
        }
    }
}

fn request_code(request: &Message) -> String {
    request
        .content
        .get("code")
        .and_then(Value::as_str)
        .unwrap_or("")
        .to_string()
}

/// The request's cursor, in code points, clamped to the code's length
/// (a missing cursor means the end, as for a console).
fn cursor_position(content: &Value, code: &str) -> usize {
    let length = codepoint_len(code);
    content
        .get("cursor_pos")
        .and_then(Value::as_u64)
        .map(|pos| (pos as usize).min(length))
        .unwrap_or(length)
}

/// Reply content for a completion, with the session's range clamped to the
/// code so a front end never gets positions past the end.
fn complete_content(completion: Completion, length: usize) -> Value {
    let end = completion.cursor_end.min(length);
    let start = completion.cursor_start.min(end);
    json!({
        "status": "ok",
        "matches": completion.matches,
        "cursor_start": start,
        "cursor_end": end,
        "metadata": {},
    })
}

fn panic_error(message: &str) -> KernelError {
    KernelError::new(
        "InternalError",
        format!("the Baroc session failed unexpectedly: {message}"),
        vec![
            format!("InternalError: the Baroc session failed unexpectedly: {message}"),
            "This is a bug in Baroc, not in your code. The kernel is still running and keeps \
             the values defined so far; please report what you ran."
                .to_string(),
        ],
    )
}

fn failure_error(failure: CallFailure) -> KernelError {
    match failure {
        CallFailure::Panicked(message) => panic_error(&message),
        CallFailure::WorkerGone => KernelError::new(
            "InternalError",
            "the Baroc session is no longer running; restart the kernel",
            vec![
                "InternalError: the Baroc session is no longer running; restart the kernel"
                    .to_string(),
            ],
        ),
    }
}

fn failure_reply(failure: CallFailure) -> Value {
    let error = failure_error(failure);
    json!({"status": "error", "ename": error.ename, "evalue": error.evalue, "traceback": error.traceback})
}

async fn execute(kernel: &Kernel, shell: &mut Shell, sender: &mut RouterSender, request: &Message) {
    let content = &request.content;
    let code = request_code(request);
    let silent = content
        .get("silent")
        .and_then(Value::as_bool)
        .unwrap_or(false);
    // The protocol: store_history defaults to true and is forced off by silent.
    let store_history = !silent
        && content
            .get("store_history")
            .and_then(Value::as_bool)
            .unwrap_or(true);
    let stop_on_error = content
        .get("stop_on_error")
        .and_then(Value::as_bool)
        .unwrap_or(true);
    if store_history {
        shell.execution_count += 1;
    }
    let count = shell.execution_count;
    if !silent {
        kernel
            .publish(
                Some(request),
                "execute_input",
                json!({"code": code, "execution_count": count}),
            )
            .await;
    }

    let outcome = run_cell_streaming(kernel, request, code.clone(), silent).await;

    if !silent {
        for output in outcome.outputs.iter().cloned() {
            publish_output(kernel, request, output, None).await;
        }
        if let Some(result) = &outcome.result {
            let data = json!({"execution_count": count, "data": mime_bundle_to_json(result), "metadata": display_metadata(result)});
            kernel.publish(Some(request), "execute_result", data).await;
        }
        if let Some(error) = &outcome.error {
            let data =
                json!({"ename": error.ename, "evalue": error.evalue, "traceback": error.traceback});
            kernel.publish(Some(request), "error", data).await;
        }
    }
    if store_history {
        let output = outcome
            .result
            .as_ref()
            .map(|bundle| bundle.plain_text().to_string());
        shell.history.push(count, &code, output);
    }

    let reply = match &outcome.error {
        Some(error) => json!({
            "status": "error",
            "execution_count": count,
            "ename": error.ename,
            "evalue": error.evalue,
            "traceback": error.traceback,
        }),
        None => {
            let expressions = content
                .get("user_expressions")
                .cloned()
                .unwrap_or_else(|| json!({}));
            json!({
                "status": "ok",
                "execution_count": count,
                "payload": [],
                "user_expressions": evaluate_expressions(kernel, &expressions).await,
            })
        }
    };
    // A silent request (a front end's own query) failing stops nothing.
    let skipped = if outcome.error.is_some() && stop_on_error && !silent {
        take_queued_cells(shell).await
    } else {
        Vec::new()
    };
    kernel.reply(sender, request, "execute_reply", reply).await;
    skip_cells(kernel, shell, sender, skipped).await;
}

/// Runs a cell on the worker and publishes each output on iopub the moment
/// the session emits it, while the cell goes on. A cell still running after
/// [`progress_delay`] gets a progress display that updates in place
/// (display_data with a `display_id`, then update_display_data) and turns
/// into a one-line summary when the cell ends. A silent request publishes
/// nothing. Returns what the session did not emit (result, error, left-overs).
async fn run_cell_streaming(kernel: &Kernel, request: &Message, code: String, silent: bool) -> ExecuteOutcome {
    kernel.interrupt.store(false, Ordering::SeqCst);
    let flag = kernel.interrupt.clone();
    let (sender, mut outputs) = mpsc::unbounded_channel::<Output>();
    let cell = kernel.worker.run(move |session| {
        session.execute_streaming(&code, &flag, &mut |output| {
            // The receiver lives until the cell's answer arrives.
            let _ = sender.send(output);
        })
    });
    tokio::pin!(cell);
    let mut progress = ProgressDisplay::new(progress_delay());
    let timer = tokio::time::sleep(progress.delay);
    tokio::pin!(timer);
    let mut timer_fired = false;
    let answer = loop {
        tokio::select! {
            biased;
            Some(output) = outputs.recv() => {
                if !silent {
                    publish_output(kernel, request, output, Some(&mut progress)).await;
                }
            }
            answer = &mut cell => break answer,
            _ = &mut timer, if !timer_fired => {
                timer_fired = true;
                if !silent {
                    progress.show(kernel, request).await;
                }
            }
        }
    };
    while let Ok(output) = outputs.try_recv() {
        if !silent {
            publish_output(kernel, request, output, Some(&mut progress)).await;
        }
    }
    let outcome = answer.unwrap_or_else(|failure| ExecuteOutcome::failure(failure_error(failure)));
    if !silent {
        progress.finish(kernel, request, outcome.error.is_some()).await;
    }
    outcome
}

/// How long a cell runs before it gets a progress display:
/// `BAROC_PROGRESS_AFTER_MS` milliseconds (default 700), so quick cells
/// show none.
fn progress_delay() -> Duration {
    let millis = std::env::var("BAROC_PROGRESS_AFTER_MS").ok().and_then(|v| v.trim().parse::<u64>().ok()).unwrap_or(700);
    Duration::from_millis(millis)
}

/// Publishes one output of a running cell. Progress goes to `progress`
/// (ignored without one).
async fn publish_output(kernel: &Kernel, request: &Message, output: Output, progress: Option<&mut ProgressDisplay>) {
    match output {
        Output::Stream { name, text } => {
            kernel.publish(Some(request), "stream", json!({"name": name.as_str(), "text": text})).await
        }
        Output::Display(bundle) => {
            let data = json!({"data": mime_bundle_to_json(&bundle), "metadata": display_metadata(&bundle), "transient": {}});
            kernel.publish(Some(request), "display_data", data).await
        }
        Output::Clear { wait } => {
            kernel.publish(Some(request), "clear_output", json!({"wait": wait})).await;
            if let Some(progress) = progress {
                // The progress display went with the rest of the output.
                progress.shown = false;
            }
        }
        Output::Progress { done, total, running } => {
            if let Some(progress) = progress {
                progress.note(kernel, request, done, total, running).await;
            }
        }
    }
}

/// The one progress display of a running cell.
struct ProgressDisplay {
    id: String,
    started: std::time::Instant,
    delay: Duration,
    /// The statement now running: (index, total, its first line).
    latest: Option<(usize, usize, String)>,
    shown: bool,
    last_sent: std::time::Instant,
}

impl ProgressDisplay {
    /// At most this often an in-place update, so a cell of many quick
    /// statements does not flood the front end.
    const UPDATE_EVERY: Duration = Duration::from_millis(200);

    fn new(delay: Duration) -> Self {
        let now = std::time::Instant::now();
        Self { id: format!("baroc-progress-{}", uuid::Uuid::new_v4()), started: now, delay, latest: None, shown: false, last_sent: now }
    }

    fn bundle(&self) -> Option<crate::mime::MimeBundle> {
        let (done, total, running) = self.latest.as_ref()?;
        let seconds = self.started.elapsed().as_secs_f64();
        let mut bundle = crate::mime::MimeBundle::plain(format!("running statement {} of {total} ({seconds:.1} s): {running}", done + 1));
        bundle.insert_text(
            "text/html",
            format!(
                "<div><progress value=\"{done}\" max=\"{total}\"></progress> running statement {} of {total} ({seconds:.1} s): <code>{}</code></div>",
                done + 1,
                crate::render::html::escape(running)
            ),
        );
        Some(bundle)
    }

    async fn send(&mut self, kernel: &Kernel, request: &Message, msg_type: &str, bundle: crate::mime::MimeBundle) {
        let data = json!({"data": mime_bundle_to_json(&bundle), "metadata": {}, "transient": {"display_id": self.id}});
        kernel.publish(Some(request), msg_type, data).await;
        self.last_sent = std::time::Instant::now();
    }

    /// The timer ran out: show the display if a statement is running.
    async fn show(&mut self, kernel: &Kernel, request: &Message) {
        if let Some(bundle) = self.bundle() {
            self.send(kernel, request, "display_data", bundle).await;
            self.shown = true;
        }
    }

    async fn note(&mut self, kernel: &Kernel, request: &Message, done: usize, total: usize, running: String) {
        self.latest = Some((done, total, running));
        let due = self.started.elapsed() >= self.delay;
        if !self.shown && due {
            self.show(kernel, request).await;
        } else if self.shown && self.last_sent.elapsed() >= Self::UPDATE_EVERY {
            if let Some(bundle) = self.bundle() {
                self.send(kernel, request, "update_display_data", bundle).await;
            }
        }
    }

    /// The cell ended: the display, if shown, becomes a summary.
    async fn finish(&mut self, kernel: &Kernel, request: &Message, failed: bool) {
        if !self.shown {
            return;
        }
        let Some((done, total, _)) = self.latest.clone() else { return };
        let seconds = self.started.elapsed().as_secs_f64();
        let plural = if total == 1 { "" } else { "s" };
        let text = if failed {
            format!("stopped at statement {} of {total} after {seconds:.1} s", done + 1)
        } else {
            format!("ran {total} statement{plural} in {seconds:.1} s")
        };
        let mut bundle = crate::mime::MimeBundle::plain(text.clone());
        bundle.insert_text("text/html", format!("<div>{}</div>", crate::render::html::escape(&text)));
        self.send(kernel, request, "update_display_data", bundle).await;
    }
}

async fn run_cell(kernel: &Kernel, code: String) -> ExecuteOutcome {
    kernel.interrupt.store(false, Ordering::SeqCst);
    let flag = kernel.interrupt.clone();
    match kernel
        .worker
        .run(move |session| session.execute(&code, &flag))
        .await
    {
        Ok(outcome) => outcome,
        Err(failure) => ExecuteOutcome::failure(failure_error(failure)),
    }
}

/// user_expressions: each is run after the cell, and its value (not its
/// printed output) returned, as the protocol's execute section describes.
async fn evaluate_expressions(kernel: &Kernel, expressions: &Value) -> Value {
    let mut results = Map::new();
    let Some(expressions) = expressions.as_object() else {
        return Value::Object(results);
    };
    for (name, expression) in expressions {
        let code = expression.as_str().unwrap_or("").to_string();
        let outcome = run_cell(kernel, code).await;
        let value = match (outcome.error, outcome.result) {
            (Some(error), _) => json!({
                "status": "error", "ename": error.ename, "evalue": error.evalue, "traceback": error.traceback,
            }),
            (None, Some(bundle)) => {
                json!({"status": "ok", "data": mime_bundle_to_json(&bundle), "metadata": {}})
            }
            (None, None) => json!({"status": "ok", "data": {}, "metadata": {}}),
        };
        results.insert(name.clone(), value);
    }
    Value::Object(results)
}
