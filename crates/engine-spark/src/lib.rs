//! Apache Spark as an upshot engine, reached through Spark Connect (Spark's gRPC client
//! protocol): each pass is one SQL query run by the cluster, and only its few aggregate rows
//! come back, as Arrow record batches.
//!
//! [`SPARK`] is the [`Connector`] for `sc://host:port` locators (Spark Connect's URL form;
//! port 15002 when omitted). Parameters after `/;` are read: `user_id=NAME`, `use_ssl=true`
//! (TLS, with the system's trusted certificates; `SSL_CERT_FILE` / `SSL_CERT_DIR` name others)
//! and `token_env=VAR` (a bearer token read from the environment variable `VAR`, sent only
//! over TLS or to a loopback address). A `token=` in the locator is refused: tokens never go
//! on the command line or in a study file.
//!
//! Key design decision: a thin client of our own rather than a general Spark Connect crate.
//! upshot sends one kind of plan (a SQL relation with positional arguments) and reads one
//! kind of answer (Arrow batches), so the dozen messages it needs are declared by hand in
//! [`proto`] with the protocol's field numbers: no `protoc` on a fresh machine, no generated
//! code, and the Arrow version is the one the DuckDB engine already builds (one Arrow in the
//! binary). The transport is `tonic` on a single-threaded `tokio` runtime owned by the engine.
//!
//! Writes: Spark has no multi-statement transactions. The results table is a managed table
//! partitioned by `run_id`, written by one `INSERT OVERWRITE` with dynamic partition
//! overwrite, so a rerun with the same run key replaces that run's partition and leaves the
//! others; docs/engines.md says what is and is not atomic.
//!
//! This crate builds no SQL of its own beyond session settings; it knows nothing of diagrams
//! or estimators.
#![deny(missing_docs)]

pub mod proto;

use arrow_array::{Array, RecordBatch};
use arrow_schema::DataType as ArrowType;
use proto::*;
use std::cell::RefCell;
use std::time::Duration;
use tonic::codegen::http::uri::PathAndQuery;
use upshot_engine::{
    redacted, Access, Aggregates, Capabilities, Cell, Column, Connector, Engine, EngineError,
    Param, Write,
};
use upshot_sql::{Dialect, Functions, Pass, Source, Spark};

const EXECUTE: &str = "/spark.connect.SparkConnectService/ExecutePlan";
const INTERRUPT: &str = "/spark.connect.SparkConnectService/Interrupt";
const RELEASE: &str = "/spark.connect.SparkConnectService/ReleaseSession";
const CLIENT_TYPE: &str = concat!("upshot/", env!("CARGO_PKG_VERSION"));

/// A Spark Connect session.
pub struct SparkEngine {
    runtime: tokio::runtime::Runtime,
    channel: tonic::transport::Channel,
    session: String,
    user: UserContext,
    /// The `authorization` header sent with every call, when the locator names a token.
    bearer: Option<tonic::metadata::MetadataValue<tonic::metadata::Ascii>>,
    timeout: RefCell<Option<Duration>>,
}

/// What a locator says: where, as whom, and how the connection is secured.
#[derive(Debug, PartialEq)]
struct Locator {
    host: String,
    port: u16,
    user_id: String,
    tls: bool,
    /// The environment variable holding the bearer token.
    token_env: Option<String>,
}

fn is_loopback(host: &str) -> bool {
    let bare = host.trim_start_matches('[').trim_end_matches(']');
    bare.eq_ignore_ascii_case("localhost")
        || bare
            .parse::<std::net::IpAddr>()
            .is_ok_and(|ip| ip.is_loopback())
}

fn parse_locator(locator: &str) -> Result<Locator, String> {
    let rest = locator
        .strip_prefix("sc://")
        .ok_or("a Spark Connect locator starts with sc://")?;
    let (authority, params) = match rest.split_once('/') {
        Some((a, p)) => (a, p.strip_prefix(';').unwrap_or(p)),
        None => (rest, ""),
    };
    if authority.contains('@') {
        return Err(
            "sc:// locators take no user or password before the host; give user_id=NAME after /;"
                .into(),
        );
    }
    let (host, port) = match authority.rsplit_once(':') {
        Some((h, p)) => (
            h,
            p.parse::<u16>()
                .map_err(|_| format!("`{p}` is not a port number"))?,
        ),
        None => (authority, 15002),
    };
    if host.is_empty() {
        return Err("no host: expected sc://host:port".into());
    }
    let mut user_id = std::env::var("USER").unwrap_or_else(|_| "upshot".into());
    let mut tls = false;
    let mut token_env = None;
    for p in params.split(';').filter(|p| !p.is_empty()) {
        let (k, v) = p.split_once('=').unwrap_or((p, ""));
        match k {
            "user_id" => user_id = v.to_string(),
            "token" => {
                return Err("the locator holds a token; tokens never go on the command line or in a study file: put it in an environment variable and name the variable with token_env=VAR".into())
            }
            "use_ssl" if v.eq_ignore_ascii_case("false") => tls = false,
            "use_ssl" if v.eq_ignore_ascii_case("true") => tls = true,
            "use_ssl" => return Err(format!("use_ssl takes true or false, not `{v}`")),
            "token_env" => {
                let valid = !v.is_empty()
                    && !v.starts_with(|c: char| c.is_ascii_digit())
                    && v.chars().all(|c| c.is_ascii_alphanumeric() || c == '_');
                if !valid {
                    return Err(format!(
                        "token_env takes the name of an environment variable (letters, digits and _), not `{v}`"
                    ));
                }
                token_env = Some(v.to_string());
            }
            other => {
                return Err(format!(
                    "unknown parameter `{other}` (sc:// locators take user_id=NAME, use_ssl=true and token_env=VAR)"
                ))
            }
        }
    }
    if token_env.is_some() && !tls && !is_loopback(host) {
        return Err(format!(
            "a token is sent only over TLS: add ;use_ssl=true (plaintext is allowed only to a loopback address, and `{host}` is not one)"
        ));
    }
    Ok(Locator {
        host: host.to_string(),
        port,
        user_id,
        tls,
        token_env,
    })
}

/// The bearer header for the token in the environment variable `var`.
fn bearer(var: &str) -> Result<tonic::metadata::MetadataValue<tonic::metadata::Ascii>, String> {
    let token = std::env::var(var).map_err(|_| {
        format!(
            "token_env={var}: the environment variable {var} is not set (it must hold the token)"
        )
    })?;
    let token = token.trim();
    if token.is_empty() {
        return Err(format!(
            "token_env={var}: the environment variable {var} is empty"
        ));
    }
    format!("Bearer {token}").parse().map_err(|_| {
        format!("token_env={var}: the token in {var} holds characters a header cannot carry")
    })
}

/// An error and its causes, outermost first ("transport error: … : invalid peer certificate").
fn chain(e: &dyn std::error::Error) -> String {
    let mut out = e.to_string();
    let mut source = e.source();
    while let Some(s) = source {
        let m = s.to_string();
        if !out.contains(&m) {
            out.push_str(": ");
            out.push_str(&m);
        }
        source = s.source();
    }
    out
}

/// A fresh session id (a version-4 UUID from the process's random hasher keys and the clock).
fn session_id() -> String {
    use std::hash::{BuildHasher, Hasher};
    let mut bytes = [0u8; 16];
    for (i, chunk) in bytes.chunks_mut(8).enumerate() {
        let mut h = std::collections::hash_map::RandomState::new().build_hasher();
        h.write_u128(
            std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map(|d| d.as_nanos())
                .unwrap_or(0),
        );
        h.write_usize(i);
        h.write_u32(std::process::id());
        chunk.copy_from_slice(&h.finish().to_le_bytes());
    }
    bytes[6] = (bytes[6] & 0x0f) | 0x40;
    bytes[8] = (bytes[8] & 0x3f) | 0x80;
    let hex: String = bytes.iter().map(|b| format!("{b:02x}")).collect();
    format!(
        "{}-{}-{}-{}-{}",
        &hex[0..8],
        &hex[8..12],
        &hex[12..16],
        &hex[16..20],
        &hex[20..32]
    )
}

/// Why a statement failed.
enum Failed {
    /// The time limit passed (the operation was interrupted on the server).
    TimedOut(u64),
    /// The server's or the client's message.
    Message(String),
}

impl Failed {
    fn into_engine(self, pass: &str) -> EngineError {
        match self {
            Failed::TimedOut(seconds) => EngineError::TimedOut {
                pass: pass.to_string(),
                seconds,
            },
            Failed::Message(message) => EngineError::Query {
                pass: pass.to_string(),
                message,
            },
        }
    }
}

/// A server's refusal as a message: the status's text without the JVM's stack.
fn status_message(s: &tonic::Status) -> String {
    let m = s.message().trim();
    let m = m.lines().next().unwrap_or(m);
    // A transport failure says little by itself ("transport error"): add its causes.
    let with_causes;
    let m = match std::error::Error::source(s) {
        Some(cause) if s.code() == tonic::Code::Unknown || s.code() == tonic::Code::Unavailable => {
            let causes = chain(cause);
            with_causes = if causes.starts_with(m) {
                causes
            } else {
                format!("{m}: {causes}")
            };
            with_causes.as_str()
        }
        _ => m,
    };
    match s.code() {
        tonic::Code::Unavailable => format!("the server is unreachable ({m})"),
        tonic::Code::Unauthenticated => format!(
            "the server refused the credentials ({m}); give the token in an environment variable named by token_env=VAR"
        ),
        tonic::Code::DeadlineExceeded | tonic::Code::Cancelled => {
            format!("the query did not finish within the time limit ({m})")
        }
        _ => m.to_string(),
    }
}

impl SparkEngine {
    /// Connects to `locator` and opens a session.
    pub fn connect(locator: &str) -> Result<Self, EngineError> {
        let shown = redacted(locator);
        let open = |message: String| EngineError::Open {
            location: shown.clone(),
            message,
        };
        let l = parse_locator(locator).map_err(open)?;
        let runtime = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .map_err(|e| open(format!("cannot start the client's runtime: {e}")))?;
        let bearer = l
            .token_env
            .as_deref()
            .map(bearer)
            .transpose()
            .map_err(open)?;
        let (host, port, tls) = (l.host.clone(), l.port, l.tls);
        let scheme = if l.tls { "https" } else { "http" };
        let mut endpoint =
            tonic::transport::Endpoint::from_shared(format!("{scheme}://{}:{}", l.host, l.port))
                .map_err(|e| open(format!("not a host and port ({e})")))?
                .connect_timeout(Duration::from_secs(10));
        if l.tls {
            let tls = tonic::transport::ClientTlsConfig::new().with_native_roots();
            endpoint = endpoint
                .tls_config(tls)
                .map_err(|e| open(format!("cannot set up TLS ({})", chain(&e))))?;
        }
        let channel = runtime.block_on(endpoint.connect()).map_err(|e| {
            let hint = if l.tls {
                "is a TLS endpoint of a Spark Connect server listening there, with a certificate this machine trusts (SSL_CERT_FILE names a CA file)?"
            } else {
                "is a Spark Connect server listening there?"
            };
            open(format!(
                "the server at {}:{} is unreachable ({}); {hint}",
                l.host,
                l.port,
                chain(&e)
            ))
        })?;
        let engine = SparkEngine {
            runtime,
            channel,
            session: session_id(),
            user: UserContext {
                user_id: l.user_id.clone(),
                user_name: l.user_id,
            },
            bearer,
            timeout: RefCell::new(None),
        };
        // ANSI mode on (Spark 4's default, set here so that a 3.x server behaves the same:
        // overflow and invalid casts raise instead of giving NULL).
        engine
            .execute("SET spark.sql.ansi.enabled = true", vec![])
            .map_err(|f| match f {
                Failed::Message(m) if m.contains("transport error") => open(format!(
                    "{m}; is a Spark Connect server listening at {host}:{port}{hint}?",
                    hint = if tls {
                        ""
                    } else {
                        " (a TLS endpoint needs ;use_ssl=true)"
                    }
                )),
                Failed::Message(m) => open(m),
                f => open(f.into_engine("setup").to_string()),
            })?;
        Ok(engine)
    }

    /// Runs one statement and returns its rows as Arrow batches; past the time limit, the
    /// operation is interrupted on the server.
    fn execute(&self, query: &str, args: Vec<Expression>) -> Result<Vec<RecordBatch>, Failed> {
        let operation = session_id();
        let timeout = *self.timeout.borrow();
        let result = self.stream(query, args, &operation, timeout);
        if let (Err(Failed::TimedOut(_)), Some(_)) = (&result, timeout) {
            self.interrupt(&operation);
        }
        result
    }

    /// A request carrying the session's credentials.
    fn request<T>(&self, message: T) -> tonic::Request<T> {
        let mut req = tonic::Request::new(message);
        if let Some(b) = &self.bearer {
            req.metadata_mut().insert("authorization", b.clone());
        }
        req
    }

    fn interrupt(&self, operation: &str) {
        let request = InterruptRequest {
            session_id: self.session.clone(),
            user_context: Some(self.user.clone()),
            client_type: Some(CLIENT_TYPE.into()),
            interrupt_type: INTERRUPT_OPERATION_ID,
            operation_id: Some(operation.to_string()),
        };
        let mut req = self.request(request);
        req.set_timeout(Duration::from_secs(10));
        let channel = self.channel.clone();
        let _ = self.runtime.block_on(async move {
            let mut grpc = tonic::client::Grpc::new(channel);
            grpc.ready().await.map_err(|_| ())?;
            let codec = tonic_prost::ProstCodec::<InterruptRequest, InterruptResponse>::new();
            grpc.unary(req, PathAndQuery::from_static(INTERRUPT), codec)
                .await
                .map(|_| ())
                .map_err(|_| ())
        });
    }

    fn stream(
        &self,
        query: &str,
        args: Vec<Expression>,
        operation: &str,
        timeout: Option<Duration>,
    ) -> Result<Vec<RecordBatch>, Failed> {
        let request = ExecutePlanRequest {
            session_id: self.session.clone(),
            user_context: Some(self.user.clone()),
            plan: Some(Plan {
                root: Some(Relation {
                    sql: Some(Sql {
                        query: query.to_string(),
                        pos_arguments: args,
                    }),
                }),
            }),
            client_type: Some(CLIENT_TYPE.into()),
            operation_id: Some(operation.to_string()),
        };
        let mut req = self.request(request);
        if let Some(t) = timeout {
            req.set_timeout(t);
        }
        let channel = self.channel.clone();
        let status = |s: tonic::Status| match (s.code(), timeout) {
            (tonic::Code::DeadlineExceeded | tonic::Code::Cancelled, Some(t)) => {
                Failed::TimedOut(t.as_secs())
            }
            _ => Failed::Message(status_message(&s)),
        };
        let unreadable = |e: arrow_schema::ArrowError| {
            Failed::Message(format!("an unreadable Arrow batch from the server: {e}"))
        };
        self.runtime.block_on(async move {
            let mut grpc = tonic::client::Grpc::new(channel);
            grpc.ready()
                .await
                .map_err(|e| Failed::Message(format!("the server is unreachable ({e})")))?;
            let codec = tonic_prost::ProstCodec::<ExecutePlanRequest, ExecutePlanResponse>::new();
            let mut stream = grpc
                .server_streaming(req, PathAndQuery::from_static(EXECUTE), codec)
                .await
                .map_err(status)?
                .into_inner();
            let mut batches = Vec::new();
            while let Some(m) = stream.message().await.map_err(status)? {
                if let Some(b) = m.arrow_batch {
                    let reader = arrow_ipc::reader::StreamReader::try_new(
                        std::io::Cursor::new(b.data),
                        None,
                    )
                    .map_err(unreadable)?;
                    for batch in reader {
                        batches.push(batch.map_err(unreadable)?);
                    }
                }
            }
            Ok(batches)
        })
    }

    /// Runs statements of upshot's own (test set-up, session settings); never user text.
    pub fn sql(&self, sql: &str, args: Vec<Expression>) -> Result<Vec<RecordBatch>, EngineError> {
        self.execute(sql, args).map_err(|f| f.into_engine("setup"))
    }

    /// Runs a query of upshot's own (tests, the benchmark) and returns its rows; never user
    /// text.
    pub fn select(&self, sql: &str) -> Result<Aggregates, EngineError> {
        self.query("setup", sql)
    }

    fn query(&self, pass: &str, sql: &str) -> Result<Aggregates, EngineError> {
        let failed = |message: String| EngineError::Query {
            pass: pass.to_string(),
            message,
        };
        let batches = self.execute(sql, vec![]).map_err(|f| f.into_engine(pass))?;
        let mut names = Vec::new();
        let mut rows = Vec::new();
        for batch in &batches {
            if names.is_empty() {
                names = batch
                    .schema()
                    .fields()
                    .iter()
                    .map(|f| f.name().clone())
                    .collect();
            }
            for r in 0..batch.num_rows() {
                let mut row = Vec::with_capacity(batch.num_columns());
                for (c, col) in batch.columns().iter().enumerate() {
                    row.push(cell(col.as_ref(), r).map_err(|t| {
                        failed(format!(
                            "column {} has the type {t}, which upshot does not read",
                            names[c]
                        ))
                    })?);
                }
                rows.push(row);
            }
        }
        Ok(Aggregates {
            pass: pass.to_string(),
            names,
            rows,
        })
    }
}

/// One value of an Arrow column: numbers of every width (decimals too) as `f64`, text as text.
fn cell(a: &dyn Array, r: usize) -> Result<Cell, String> {
    use arrow_array::cast::AsArray;
    use arrow_array::types::*;
    if a.is_null(r) {
        return Ok(Cell::Null);
    }
    Ok(match a.data_type() {
        ArrowType::Float64 => Cell::Number(a.as_primitive::<Float64Type>().value(r)),
        ArrowType::Float32 => Cell::Number(f64::from(a.as_primitive::<Float32Type>().value(r))),
        ArrowType::Int64 => Cell::Number(a.as_primitive::<Int64Type>().value(r) as f64),
        ArrowType::Int32 => Cell::Number(f64::from(a.as_primitive::<Int32Type>().value(r))),
        ArrowType::Int16 => Cell::Number(f64::from(a.as_primitive::<Int16Type>().value(r))),
        ArrowType::Int8 => Cell::Number(f64::from(a.as_primitive::<Int8Type>().value(r))),
        ArrowType::Decimal128(_, s) => {
            let v = a.as_primitive::<Decimal128Type>().value(r);
            Cell::Number(v as f64 / 10f64.powi(i32::from(*s)))
        }
        ArrowType::Boolean => Cell::Number(if a.as_boolean().value(r) { 1.0 } else { 0.0 }),
        ArrowType::Utf8 => Cell::Text(a.as_string::<i32>().value(r).to_string()),
        ArrowType::LargeUtf8 => Cell::Text(a.as_string::<i64>().value(r).to_string()),
        t => return Err(t.to_string()),
    })
}

/// Whether an Arrow type (as Spark sends a column) is a number, an integer, a boolean.
fn kind(t: &ArrowType) -> (bool, bool, bool) {
    match t {
        ArrowType::Int8 | ArrowType::Int16 | ArrowType::Int32 | ArrowType::Int64 => {
            (true, true, false)
        }
        ArrowType::Decimal128(_, 0) => (true, true, false),
        ArrowType::Float32 | ArrowType::Float64 | ArrowType::Decimal128(_, _) => {
            (true, false, false)
        }
        ArrowType::Boolean => (true, false, true),
        _ => (false, false, false),
    }
}

/// Spark's name of an Arrow type, for messages.
fn spark_type_name(t: &ArrowType) -> String {
    match t {
        ArrowType::Int8 => "tinyint".into(),
        ArrowType::Int16 => "smallint".into(),
        ArrowType::Int32 => "int".into(),
        ArrowType::Int64 => "bigint".into(),
        ArrowType::Float32 => "float".into(),
        ArrowType::Float64 => "double".into(),
        ArrowType::Decimal128(p, s) => format!("decimal({p},{s})"),
        ArrowType::Boolean => "boolean".into(),
        ArrowType::Utf8 | ArrowType::LargeUtf8 => "string".into(),
        ArrowType::Date32 => "date".into(),
        ArrowType::Timestamp(_, _) => "timestamp".into(),
        other => other.to_string().to_lowercase(),
    }
}

/// A parameter as a Spark Connect literal.
fn literal(p: &Param, text: bool) -> Expression {
    let value = match p {
        Param::Null => LiteralValue::Null(DataType {
            kind: Some(if text {
                Kind::String(Empty {})
            } else {
                Kind::Double(Empty {})
            }),
        }),
        Param::Number(x) => LiteralValue::Double(*x),
        Param::Text(s) => LiteralValue::String(s.clone()),
    };
    Expression {
        literal: Some(Literal { value: Some(value) }),
    }
}

/// `INSERT ... VALUES (?, ...)` with its one row of markers repeated `n` times (Spark
/// overwrites a partition per statement, so a run's rows go in one statement). The statement
/// is upshot's own; it is changed as an AST.
fn many_rows(sql: &str, n: usize) -> Result<String, String> {
    use sqlparser::ast::{SetExpr, Statement};
    let mut stmts = sqlparser::parser::Parser::parse_sql(Spark.parser().as_ref(), sql)
        .map_err(|e| format!("an insert statement of upshot's does not parse: {e}"))?;
    if let [Statement::Insert(insert)] = stmts.as_mut_slice() {
        if let Some(q) = insert.source.as_mut() {
            if let SetExpr::Values(v) = q.body.as_mut() {
                if let [row] = v.rows.as_slice() {
                    v.rows = vec![row.clone(); n];
                    return Ok(stmts[0].to_string());
                }
            }
        }
    }
    Err("upshot's insert statement is not INSERT ... VALUES (one row)".into())
}

impl Engine for SparkEngine {
    fn dialect(&self) -> &'static dyn Dialect {
        &Spark
    }

    fn capabilities(&self) -> Capabilities {
        Capabilities {
            functions: Functions::NONE,
            reads_files: false,
            durable: true,
        }
    }

    fn run(&self, pass: &Pass) -> Result<Aggregates, EngineError> {
        self.query(&pass.name, &pass.query.to_string())
    }

    fn limit_time(&self, limit: Duration) -> Result<(), EngineError> {
        *self.timeout.borrow_mut() = Some(limit);
        Ok(())
    }

    fn columns(&self, source: &Source) -> Result<Vec<Column>, EngineError> {
        let probe =
            upshot_sql::schema_probe(&self.flavor(), source).map_err(|e| EngineError::Query {
                pass: "schema".into(),
                message: e.to_string(),
            })?;
        let batches = self
            .execute(&probe.query.to_string(), vec![])
            .map_err(|f| f.into_engine("schema"))?;
        let schema = batches
            .first()
            .map(|b| b.schema())
            .ok_or_else(|| EngineError::Query {
                pass: "schema".into(),
                message: "the server sent no schema for the source".into(),
            })?;
        Ok(schema
            .fields()
            .iter()
            .map(|f| {
                let (numeric, integer, boolean) = kind(f.data_type());
                Column {
                    name: f.name().clone(),
                    type_name: spark_type_name(f.data_type()),
                    numeric,
                    integer,
                    boolean,
                }
            })
            .collect())
    }

    fn write(
        &self,
        statements: &[Write],
        before_commit: &mut dyn FnMut() -> Result<(), String>,
    ) -> Result<(), EngineError> {
        let failed = |message: String| EngineError::Query {
            pass: "write".into(),
            message,
        };
        // Spark has no transaction: the statements are checked and prepared first, then run
        // in order (create, then the one insert that overwrites the run's partition); the
        // surface's output comes last, and when it fails the rows stay written.
        let mut ready = Vec::new();
        for w in statements {
            if w.rows.len() <= 1 {
                let args = w.rows.first().map(|r| args(r)).unwrap_or_default();
                ready.push((w.sql.clone(), args));
            } else {
                let sql = many_rows(&w.sql, w.rows.len()).map_err(failed)?;
                ready.push((sql, w.rows.iter().flat_map(|r| args(r)).collect()));
            }
        }
        self.execute(
            "SET spark.sql.sources.partitionOverwriteMode = dynamic",
            vec![],
        )
        .map_err(|f| f.into_engine("write"))?;
        for (sql, args) in ready {
            self.execute(&sql, args)
                .map_err(|f| f.into_engine("write"))?;
        }
        before_commit().map_err(|why| {
            EngineError::Written(format!(
                "{why}; the rows were written (Spark has no transaction to roll back: rerun with the same --run-key to replace them)"
            ))
        })?;
        Ok(())
    }
}

fn args(row: &[Param]) -> Vec<Expression> {
    row.iter()
        .map(|p| literal(p, !matches!(p, Param::Number(_))))
        .collect()
}

impl Drop for SparkEngine {
    fn drop(&mut self) {
        let request = ReleaseSessionRequest {
            session_id: self.session.clone(),
            user_context: Some(self.user.clone()),
            client_type: Some(CLIENT_TYPE.into()),
        };
        let mut req = self.request(request);
        req.set_timeout(Duration::from_secs(5));
        let channel = self.channel.clone();
        let _ = self.runtime.block_on(async move {
            let mut grpc = tonic::client::Grpc::new(channel);
            grpc.ready().await.map_err(|_| ())?;
            let codec =
                tonic_prost::ProstCodec::<ReleaseSessionRequest, ReleaseSessionResponse>::new();
            grpc.unary(req, PathAndQuery::from_static(RELEASE), codec)
                .await
                .map(|_| ())
                .map_err(|_| ())
        });
    }
}

/// Opens Spark Connect sessions from `sc://host:port` locators.
pub struct SparkConnector;

/// The Spark Connect connector.
pub static SPARK: SparkConnector = SparkConnector;

impl Connector for SparkConnector {
    fn name(&self) -> &'static str {
        "spark"
    }
    fn locators(&self) -> &'static str {
        "sc://host:port (Spark Connect)"
    }
    fn accepts(&self, locator: &str) -> bool {
        locator.starts_with("sc://")
    }
    fn dialect(&self) -> &'static dyn Dialect {
        &Spark
    }
    fn connect(
        &self,
        locator: &str,
        _access: Access,
        files: &[String],
    ) -> Result<Box<dyn Engine>, EngineError> {
        if let Some(f) = files.first() {
            return Err(EngineError::Open {
                location: redacted(locator),
                message: format!(
                    "{f} is a file: Spark reads tables and queries here, not files on this machine; load the file into a table, or read it with a DuckDB database"
                ),
            });
        }
        Ok(Box::new(SparkEngine::connect(locator)?))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn locators() {
        let l = parse_locator("sc://127.0.0.1:15003/;user_id=ana").unwrap();
        assert_eq!(
            l,
            Locator {
                host: "127.0.0.1".into(),
                port: 15003,
                user_id: "ana".into(),
                tls: false,
                token_env: None,
            }
        );
        let l =
            parse_locator("sc://spark.example:443/;use_ssl=true;token_env=SPARK_TOKEN").unwrap();
        assert!(l.tls);
        assert_eq!(l.token_env.as_deref(), Some("SPARK_TOKEN"));
        // A token in plaintext only to a loopback address.
        assert!(parse_locator("sc://127.0.0.1:1/;token_env=T").is_ok());
        assert!(parse_locator("sc://[::1]:1/;token_env=T").is_ok());
        assert!(parse_locator("sc://localhost:1/;token_env=T").is_ok());
        let e = parse_locator("sc://spark.example/;token_env=T").unwrap_err();
        assert!(e.contains("use_ssl=true"), "{e}");
        assert!(parse_locator("sc://h/;token_env=").is_err());
        assert!(parse_locator("sc://h/;use_ssl=true;token_env=$(x)").is_err());
        assert!(parse_locator("sc://h/;use_ssl=yes").is_err());
        assert_eq!(parse_locator("sc://spark.example").unwrap().port, 15002);
        let e = parse_locator("sc://h:1/;token=abc").unwrap_err();
        assert!(e.contains("token") && !e.contains("abc"), "{e}");
        assert!(parse_locator("sc://h:99999").is_err());
        assert!(parse_locator("sc://:1").is_err());
        assert!(parse_locator("sc://h/;use_ssl=true").unwrap().tls);
        assert!(parse_locator("sc://u:p@h").is_err());
    }

    #[test]
    fn tokens_come_from_the_environment() {
        std::env::set_var("UPSHOT_UNIT_TOKEN", " abc.def ");
        assert_eq!(bearer("UPSHOT_UNIT_TOKEN").unwrap(), "Bearer abc.def");
        std::env::set_var("UPSHOT_UNIT_TOKEN_EMPTY", "");
        let e = bearer("UPSHOT_UNIT_TOKEN_EMPTY").unwrap_err();
        assert!(e.contains("empty"), "{e}");
        let e = bearer("UPSHOT_UNIT_TOKEN_UNSET").unwrap_err();
        assert!(e.contains("not set"), "{e}");
        std::env::set_var("UPSHOT_UNIT_TOKEN_BAD", "a\nb");
        let e = bearer("UPSHOT_UNIT_TOKEN_BAD").unwrap_err();
        assert!(!e.contains("a\nb"), "{e}");
    }

    #[test]
    fn session_ids_are_uuids() {
        let a = session_id();
        assert_eq!(a.len(), 36);
        assert_eq!(&a[14..15], "4");
        assert_ne!(a, session_id());
    }

    #[test]
    fn one_insert_for_many_rows() {
        let sql = upshot_sql::results_sql(&Spark, "r").unwrap().insert;
        let many = many_rows(&sql, 3).unwrap();
        assert_eq!(many.matches('?').count(), 3 * sql.matches('?').count());
    }
}
