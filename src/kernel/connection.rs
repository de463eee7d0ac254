//! The connection file a Jupyter manager writes before starting the kernel.
//!
//! It names the transport, the address to bind, one port per channel and the
//! key that signs messages. Format: the messaging protocol's "connection
//! files" section (JSON object with the fields below).

use std::net::IpAddr;
use std::path::Path;

use serde::Deserialize;

use super::KernelFailure;

/// The only signature scheme the kernel implements (the protocol's default).
pub const SIGNATURE_SCHEME: &str = "hmac-sha256";

/// How the sockets are reached.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Transport {
    Tcp,
    Ipc,
}

/// The five channels of a kernel.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Channel {
    Shell,
    Control,
    Iopub,
    Stdin,
    Heartbeat,
}

impl Channel {
    pub fn name(self) -> &'static str {
        match self {
            Channel::Shell => "shell",
            Channel::Control => "control",
            Channel::Iopub => "iopub",
            Channel::Stdin => "stdin",
            Channel::Heartbeat => "heartbeat",
        }
    }
}

/// A parsed connection file.
#[derive(Debug, Clone, PartialEq, Eq, Deserialize)]
pub struct ConnectionInfo {
    pub transport: Transport,
    /// Address to bind (tcp) or path stem of the socket files (ipc).
    pub ip: String,
    pub shell_port: u16,
    pub iopub_port: u16,
    pub stdin_port: u16,
    pub control_port: u16,
    pub hb_port: u16,
    /// Signing key; empty disables signing (the protocol allows it).
    #[serde(default)]
    pub key: String,
    #[serde(default = "default_scheme")]
    pub signature_scheme: String,
    #[serde(default)]
    pub kernel_name: Option<String>,
}

fn default_scheme() -> String {
    SIGNATURE_SCHEME.to_string()
}

impl ConnectionInfo {
    /// Read and check a connection file.
    pub fn from_file(path: &Path) -> Result<Self, KernelFailure> {
        let text =
            std::fs::read_to_string(path).map_err(|error| KernelFailure::ConnectionFile {
                path: path.to_path_buf(),
                reason: format!("cannot read it: {error}"),
            })?;
        Self::parse(&text).map_err(|reason| KernelFailure::ConnectionFile {
            path: path.to_path_buf(),
            reason,
        })
    }

    /// Parse and check the JSON text of a connection file; the error says
    /// what was wrong and what would be accepted.
    pub fn parse(text: &str) -> Result<Self, String> {
        let info: ConnectionInfo = serde_json::from_str(text).map_err(|error| {
            format!(
                "not a valid connection file ({error}); expected a JSON object with transport \
                 (\"tcp\" or \"ipc\"), ip, shell_port, iopub_port, stdin_port, control_port, \
                 hb_port, key and signature_scheme"
            )
        })?;
        if info.signature_scheme != SIGNATURE_SCHEME {
            return Err(format!(
                "signature_scheme \"{}\" is not supported; the kernel signs with \"{SIGNATURE_SCHEME}\"",
                info.signature_scheme
            ));
        }
        if info.ip.trim().is_empty() {
            return Err("ip is empty; give the address to bind, e.g. \"127.0.0.1\"".to_string());
        }
        if info.transport == Transport::Tcp && info.ip.parse::<IpAddr>().is_err() {
            return Err(format!(
                "ip \"{}\" is not an IPv4 or IPv6 address; the kernel binds only to the address \
                 the file names, e.g. \"127.0.0.1\" or \"::1\"",
                info.ip
            ));
        }
        Ok(info)
    }

    pub fn port(&self, channel: Channel) -> u16 {
        match channel {
            Channel::Shell => self.shell_port,
            Channel::Control => self.control_port,
            Channel::Iopub => self.iopub_port,
            Channel::Stdin => self.stdin_port,
            Channel::Heartbeat => self.hb_port,
        }
    }

    /// The ZeroMQ endpoint of one channel, e.g. "tcp://127.0.0.1:5555" or,
    /// for ipc, `ipc://IP-PORT` (the naming Jupyter's manager uses).
    pub fn endpoint(&self, channel: Channel) -> String {
        let port = self.port(channel);
        match self.transport {
            Transport::Tcp => match self.ip.parse::<IpAddr>() {
                Ok(IpAddr::V6(address)) => format!("tcp://[{address}]:{port}"),
                _ => format!("tcp://{}:{port}", self.ip),
            },
            Transport::Ipc => format!("ipc://{}-{port}", self.ip),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Shape of the example in the messaging protocol's connection-file section.
    const SAMPLE: &str = r#"{
        "control_port": 50160, "shell_port": 57503, "transport": "tcp",
        "signature_scheme": "hmac-sha256", "stdin_port": 52597, "hb_port": 42540,
        "ip": "127.0.0.1", "iopub_port": 40885, "key": "a0436f6c-1916-498b-8eb9-e81ab9368e84",
        "kernel_name": "baroc"
    }"#;

    #[test]
    fn parses_a_tcp_connection_file() {
        let info = ConnectionInfo::parse(SAMPLE).unwrap();
        assert_eq!(info.transport, Transport::Tcp);
        assert_eq!(info.endpoint(Channel::Shell), "tcp://127.0.0.1:57503");
        assert_eq!(info.endpoint(Channel::Heartbeat), "tcp://127.0.0.1:42540");
        assert_eq!(info.key, "a0436f6c-1916-498b-8eb9-e81ab9368e84");
        assert_eq!(info.kernel_name.as_deref(), Some("baroc"));
    }

    #[test]
    fn ipv6_addresses_are_bracketed_and_ipc_uses_path_stem() {
        let v6 = SAMPLE.replace("127.0.0.1", "::1");
        let info = ConnectionInfo::parse(&v6).unwrap();
        assert_eq!(info.endpoint(Channel::Iopub), "tcp://[::1]:40885");
        let ipc = SAMPLE
            .replace("\"tcp\"", "\"ipc\"")
            .replace("127.0.0.1", "/tmp/kernel-7");
        let info = ConnectionInfo::parse(&ipc).unwrap();
        assert_eq!(info.endpoint(Channel::Control), "ipc:///tmp/kernel-7-50160");
    }

    #[test]
    fn rejects_other_schemes_and_host_names_with_a_hint() {
        let md5 = SAMPLE.replace("hmac-sha256", "hmac-md5");
        let reason = ConnectionInfo::parse(&md5).unwrap_err();
        assert!(reason.contains("hmac-sha256"), "{reason}");
        let named = SAMPLE.replace("127.0.0.1", "anywhere");
        let reason = ConnectionInfo::parse(&named).unwrap_err();
        assert!(reason.contains("127.0.0.1"), "{reason}");
        let reason = ConnectionInfo::parse("{\"ip\": 3}").unwrap_err();
        assert!(reason.contains("shell_port"), "{reason}");
    }

    #[test]
    fn missing_scheme_defaults_to_hmac_sha256() {
        let without = SAMPLE.replace("\"signature_scheme\": \"hmac-sha256\",", "");
        let info = ConnectionInfo::parse(&without).unwrap();
        assert_eq!(info.signature_scheme, SIGNATURE_SCHEME);
    }
}
