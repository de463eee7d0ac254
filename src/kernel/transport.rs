//! Thin layer over the ZeroMQ implementation.
//!
//! The rest of the kernel sees only frames (`Vec<Vec<u8>>`) and these four
//! types, so a change of the third-party crate's API (its major versions
//! move often) touches this file alone. The crate is a pure-Rust ZeroMQ
//! (ZMTP 3) on tokio: no C library is needed.

use bytes::Bytes;
use zeromq::{Socket, SocketRecv, SocketSend, ZmqMessage};

/// Error text from the socket layer.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TransportError(pub String);

impl std::fmt::Display for TransportError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

fn error(error: impl std::fmt::Display) -> TransportError {
    TransportError(error.to_string())
}

fn to_zmq(frames: Vec<Vec<u8>>) -> Result<ZmqMessage, TransportError> {
    let frames: Vec<Bytes> = frames.into_iter().map(Bytes::from).collect();
    ZmqMessage::try_from(frames)
        .map_err(|_| TransportError("cannot send a message of no frames".to_string()))
}

fn from_zmq(message: ZmqMessage) -> Vec<Vec<u8>> {
    message
        .into_vec()
        .into_iter()
        .map(|frame| frame.to_vec())
        .collect()
}

/// Receiving half of a ROUTER socket (shell, control, stdin, heartbeat).
/// Each received message starts with the peer's routing identity frame.
pub struct RouterReceiver {
    inner: zeromq::RouterRecvHalf,
}

/// Sending half of a ROUTER socket; cheap to clone. The first frame of a
/// sent message names the peer it goes to.
#[derive(Clone)]
pub struct RouterSender {
    inner: zeromq::RouterSendHalf,
}

/// Bind a ROUTER socket to `endpoint` and split it into its halves.
pub async fn bind_router(endpoint: &str) -> Result<(RouterSender, RouterReceiver), TransportError> {
    let mut socket = zeromq::RouterSocket::new();
    socket.bind(endpoint).await.map_err(error)?;
    let (send, recv) = socket.split();
    Ok((RouterSender { inner: send }, RouterReceiver { inner: recv }))
}

impl RouterReceiver {
    pub async fn recv(&mut self) -> Result<Vec<Vec<u8>>, TransportError> {
        self.inner.recv().await.map(from_zmq).map_err(error)
    }
}

impl RouterSender {
    pub async fn send(&mut self, frames: Vec<Vec<u8>>) -> Result<(), TransportError> {
        let message = to_zmq(frames)?;
        self.inner.send(message).await.map_err(error)
    }
}

/// A PUB socket (iopub): every subscriber whose prefix matches the first
/// frame gets a copy; with no subscriber the message is dropped, as in
/// any ZeroMQ publisher. A subscriber that stops reading loses messages
/// once its queue is full instead of holding up the kernel (the crate's
/// 0.7 series queues per subscriber; 0.6 awaited each one in turn, which
/// let one stuck client freeze every publish).
pub struct Publisher {
    inner: zeromq::PubSocket,
}

pub async fn bind_publisher(endpoint: &str) -> Result<Publisher, TransportError> {
    let mut socket = zeromq::PubSocket::new();
    socket.bind(endpoint).await.map_err(error)?;
    Ok(Publisher { inner: socket })
}

impl Publisher {
    pub async fn send(&mut self, frames: Vec<Vec<u8>>) -> Result<(), TransportError> {
        let message = to_zmq(frames)?;
        self.inner.send(message).await.map_err(error)
    }
}
