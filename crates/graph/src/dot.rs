//! DOT input (the Graphviz language, an open standard) as an alternative diagram syntax.
//!
//! Supported: `[strict] digraph [name] { ... }` with node and edge statements, chains
//! `a -> b -> c`, attribute lists, and comments. Attributes upshot reads: on nodes
//! `latent=true`, `role=latent|observed`, `kind=binary|categorical|ordinal|count|continuous`;
//! on edges `dir=both` (a latent common cause, as `a <-> b`) and `dir=back`. Layout
//! attributes are accepted and ignored. Subgraphs and ports are rejected with a message.

use crate::cursor::Parser;
use crate::diagram::{Diagram, DiagramError, Span};

#[derive(Clone, Debug, PartialEq)]
enum Tok {
    Id(String, bool), // text, was quoted
    LBrace,
    RBrace,
    LBracket,
    RBracket,
    Eq,
    Semi,
    Comma,
    Colon,
    Arrow,
    Line, // `--`
    Eof,
}

fn describe(t: &Tok) -> String {
    match t {
        Tok::Id(s, _) => format!("`{s}`"),
        Tok::LBrace => "`{`".into(),
        Tok::RBrace => "`}`".into(),
        Tok::LBracket => "`[`".into(),
        Tok::RBracket => "`]`".into(),
        Tok::Eq => "`=`".into(),
        Tok::Semi => "`;`".into(),
        Tok::Comma => "`,`".into(),
        Tok::Colon => "`:`".into(),
        Tok::Arrow => "`->`".into(),
        Tok::Line => "`--`".into(),
        Tok::Eof => "the end of the text".into(),
    }
}

/// Whether the text (after comments and blanks) starts with `digraph`, `strict` or `graph`.
pub(crate) fn looks_like_dot(text: &str) -> bool {
    match lex(text) {
        Ok(toks) => matches!(toks.first(), Some((Tok::Id(w, false), _))
            if ["digraph", "strict", "graph"].contains(&w.to_ascii_lowercase().as_str())),
        Err(_) => {
            let t = text.trim_start();
            t.starts_with("digraph") || t.starts_with("strict")
        }
    }
}

fn lex(text: &str) -> Result<Vec<(Tok, Span)>, DiagramError> {
    let chars: Vec<char> = text.chars().collect();
    let mut out = Vec::new();
    let (mut i, mut line, mut col) = (0usize, 1usize, 1usize);
    let mut at_line_start = true;
    macro_rules! step {
        () => {{
            if chars[i] == '\n' {
                line += 1;
                col = 1;
            } else {
                col += 1;
            }
            i += 1;
        }};
    }
    while i < chars.len() {
        let c = chars[i];
        let span = Span { line, col };
        if c == '#' && at_line_start {
            while i < chars.len() && chars[i] != '\n' {
                step!();
            }
            continue;
        }
        if c == '\n' {
            at_line_start = true;
            step!();
            continue;
        }
        if c.is_whitespace() {
            step!();
            continue;
        }
        at_line_start = false;
        let next = chars.get(i + 1).copied();
        match c {
            '/' if next == Some('/') => {
                while i < chars.len() && chars[i] != '\n' {
                    step!();
                }
            }
            '/' if next == Some('*') => {
                step!();
                step!();
                loop {
                    if i >= chars.len() {
                        return Err(DiagramError::Syntax {
                            span,
                            message: "unterminated comment `/*`: close it with `*/`".into(),
                        });
                    }
                    if chars[i] == '*' && chars.get(i + 1) == Some(&'/') {
                        step!();
                        step!();
                        break;
                    }
                    step!();
                }
            }
            '{' | '}' | '[' | ']' | '=' | ';' | ',' | ':' => {
                out.push((
                    match c {
                        '{' => Tok::LBrace,
                        '}' => Tok::RBrace,
                        '[' => Tok::LBracket,
                        ']' => Tok::RBracket,
                        '=' => Tok::Eq,
                        ';' => Tok::Semi,
                        ',' => Tok::Comma,
                        _ => Tok::Colon,
                    },
                    span,
                ));
                step!();
            }
            '-' if next == Some('>') => {
                out.push((Tok::Arrow, span));
                step!();
                step!();
            }
            '-' if next == Some('-') => {
                out.push((Tok::Line, span));
                step!();
                step!();
            }
            '"' => {
                step!();
                let mut s = String::new();
                loop {
                    match chars.get(i) {
                        None => {
                            return Err(DiagramError::Syntax {
                                span,
                                message: "unterminated string: add the closing `\"`".into(),
                            })
                        }
                        Some('"') => {
                            step!();
                            break;
                        }
                        Some('\\') if chars.get(i + 1) == Some(&'"') => {
                            s.push('"');
                            step!();
                            step!();
                        }
                        Some('\\') if chars.get(i + 1) == Some(&'\n') => {
                            step!();
                            step!();
                        }
                        Some(&ch) => {
                            s.push(ch);
                            step!();
                        }
                    }
                }
                out.push((Tok::Id(s, true), span));
            }
            '<' => {
                return Err(DiagramError::Syntax {
                    span,
                    message: "HTML-like labels `<...>` are not supported; use a quoted string"
                        .into(),
                })
            }
            c if c.is_alphanumeric() || c == '_' || c == '.' || c == '-' => {
                let mut s = String::new();
                while i < chars.len()
                    && (chars[i].is_alphanumeric() || chars[i] == '_' || chars[i] == '.')
                    || (i < chars.len() && chars[i] == '-' && s.is_empty())
                {
                    s.push(chars[i]);
                    step!();
                }
                out.push((Tok::Id(s, false), span));
            }
            other => {
                return Err(DiagramError::Syntax {
                    span,
                    message: format!("unexpected character `{other}` in DOT input"),
                })
            }
        }
    }
    out.push((Tok::Eof, Span { line, col }));
    Ok(out)
}

fn err(span: Span, message: String) -> DiagramError {
    DiagramError::Syntax { span, message }
}

fn keyword(t: &Tok, k: &str) -> bool {
    matches!(t, Tok::Id(s, false) if s.eq_ignore_ascii_case(k))
}

impl Parser<Tok> {
    fn expect_id(&mut self, what: &str) -> Result<(String, Span), DiagramError> {
        match self.bump() {
            (Tok::Id(s, _), span) => Ok((s, span)),
            (t, span) => Err(err(
                span,
                format!("expected {what}, found {}", describe(&t)),
            )),
        }
    }

    fn attrs(&mut self) -> Result<Vec<(String, String, Span)>, DiagramError> {
        let mut out = Vec::new();
        while self.peek().0 == Tok::LBracket {
            self.bump();
            loop {
                match self.peek().0.clone() {
                    Tok::RBracket => {
                        self.bump();
                        break;
                    }
                    Tok::Comma | Tok::Semi => {
                        self.bump();
                    }
                    _ => {
                        let (k, span) = self.expect_id("an attribute name or `]`")?;
                        let v = if self.peek().0 == Tok::Eq {
                            self.bump();
                            self.expect_id("an attribute value")?.0
                        } else {
                            "true".to_string()
                        };
                        out.push((k.to_ascii_lowercase(), v, span));
                    }
                }
            }
        }
        Ok(out)
    }

    fn node_id(&mut self) -> Result<(usize, Span), DiagramError> {
        let (t, span) = self.peek().clone();
        match t {
            Tok::Id(name, quoted) => {
                if !quoted
                    && ["subgraph", "node", "edge", "graph", "digraph", "strict"]
                        .iter()
                        .any(|k| name.eq_ignore_ascii_case(k))
                {
                    return Err(err(
                        span,
                        format!("`{name}` is a DOT keyword; subgraphs are not supported, quote it to use it as a name"),
                    ));
                }
                self.bump();
                if self.peek().0 == Tok::Colon {
                    return Err(err(
                        self.peek().1,
                        "ports (`node:port`) are not supported".into(),
                    ));
                }
                Ok((self.b.node(&name, span), span))
            }
            Tok::LBrace => Err(err(
                span,
                "subgraphs `{ ... }` are not supported; write each edge separately".into(),
            )),
            t => Err(err(
                span,
                format!("expected a node name, found {}", describe(&t)),
            )),
        }
    }

    fn node_attrs(
        &mut self,
        n: usize,
        attrs: &[(String, String, Span)],
    ) -> Result<(), DiagramError> {
        for (k, v, span) in attrs {
            let v = v.to_ascii_lowercase();
            match k.as_str() {
                "latent" => match v.as_str() {
                    "true" | "1" | "yes" => self.b.declare(n, "latent", *span)?,
                    "false" | "0" | "no" => self.b.declare(n, "observed", *span)?,
                    _ => {
                        return Err(err(
                            *span,
                            format!("`latent` takes true or false, found `{v}`"),
                        ))
                    }
                },
                "role" | "kind" => self.b.declare(n, &v, *span)?,
                _ => {}
            }
        }
        Ok(())
    }

    fn statement(&mut self) -> Result<(), DiagramError> {
        let (t, span) = self.peek().clone();
        if keyword(&t, "graph") || keyword(&t, "node") || keyword(&t, "edge") {
            self.bump();
            self.attrs()?;
            return Ok(());
        }
        if keyword(&t, "subgraph") {
            return Err(err(
                span,
                "subgraphs are not supported; write each edge separately".into(),
            ));
        }
        if let Tok::Id(_, _) = t {
            if self.toks.get(self.pos + 1).map(|x| &x.0) == Some(&Tok::Eq) {
                self.bump();
                self.bump();
                self.expect_id("a value after `=`")?;
                return Ok(());
            }
        }
        let mut chain = vec![self.node_id()?];
        loop {
            match self.peek().clone() {
                (Tok::Arrow, _) => {
                    self.bump();
                    chain.push(self.node_id()?);
                }
                (Tok::Line, s) => {
                    return Err(err(s, "undirected edge `--` in a digraph; use `->`".into()));
                }
                _ => break,
            }
        }
        let attrs = self.attrs()?;
        if chain.len() == 1 {
            return self.node_attrs(chain[0].0, &attrs);
        }
        let mut dir = "forward".to_string();
        for (k, v, s) in &attrs {
            if k == "dir" {
                dir = v.to_ascii_lowercase();
                if !["forward", "back", "both"].contains(&dir.as_str()) {
                    return Err(err(
                        *s,
                        format!("edge `dir={v}` is not causal; use forward, back or both"),
                    ));
                }
            }
        }
        for w in chain.windows(2) {
            let ((a, _), (b, _)) = (w[0], w[1]);
            let at = w[1].1;
            match dir.as_str() {
                "back" => self.b.edge(b, a, at)?,
                "both" => self.b.confounded(a, b, at)?,
                _ => self.b.edge(a, b, at)?,
            }
        }
        Ok(())
    }
}

/// Parses DOT text into a diagram.
pub(crate) fn parse(text: &str) -> Result<Diagram, DiagramError> {
    let mut p = Parser::new(lex(text)?);
    if keyword(&p.peek().0, "strict") {
        p.bump();
    }
    let (t, span) = p.bump();
    if keyword(&t, "graph") {
        return Err(err(
            span,
            "an undirected `graph` is not a causal diagram; write `digraph` with `->` edges".into(),
        ));
    }
    if !keyword(&t, "digraph") {
        return Err(err(
            span,
            format!("expected `digraph`, found {}", describe(&t)),
        ));
    }
    if let Tok::Id(_, _) = p.peek().0 {
        p.bump();
    }
    match p.bump() {
        (Tok::LBrace, _) => {}
        (t, span) => {
            return Err(err(
                span,
                format!("expected `{{` after `digraph`, found {}", describe(&t)),
            ))
        }
    }
    loop {
        match p.peek().0.clone() {
            Tok::RBrace => {
                p.bump();
                break;
            }
            Tok::Semi => {
                p.bump();
            }
            Tok::Eof => {
                let s = p.peek().1;
                return Err(err(s, "missing `}` at the end of the digraph".into()));
            }
            _ => p.statement()?,
        }
    }
    let (t, span) = p.peek().clone();
    if t != Tok::Eof {
        return Err(err(
            span,
            format!("unexpected {} after the closing `}}`", describe(&t)),
        ));
    }
    p.b.finish()
}

#[cfg(test)]
mod tests {
    use crate::diagram::{Diagram, DiagramError, Kind};

    #[test]
    fn dot_digraph() {
        let d = Diagram::parse(
            "// comment\nstrict digraph voucher {\n  rankdir=LR; node [shape=box]\n  zone -> voucher -> \"spend 30d\";\n  income [latent=true, kind=continuous]\n  income -> voucher; income -> \"spend 30d\"\n  voucher -> app [dir=both, style=dashed]\n}\n",
        )
        .unwrap();
        let i = |n: &str| d.index_of(n).unwrap();
        assert!(d.dag().has_edge(i("zone"), i("voucher")));
        assert!(d.dag().has_edge(i("voucher"), i("spend 30d")));
        assert!(d.is_latent(i("income")));
        assert_eq!(d.node(i("income")).kind, Kind::Continuous);
        assert!(d.is_latent(i("voucher <-> app")));
    }

    #[test]
    fn dot_errors() {
        let e = Diagram::parse("graph g { a -- b }").unwrap_err();
        assert!(e.to_string().contains("undirected"), "{e}");
        let e = Diagram::parse("digraph { a -> b\n  subgraph s { c } }").unwrap_err();
        assert_eq!(e.span().unwrap().line, 2, "{e}");
        let e = Diagram::parse("digraph { a -> b").unwrap_err();
        assert!(e.to_string().contains("missing `}`"), "{e}");
        let e = Diagram::parse("digraph { a -> b -> a }").unwrap_err();
        assert!(matches!(e, DiagramError::Cycle { .. }), "{e}");
        let e = Diagram::parse("digraph { a [role=hidden] }").unwrap_err();
        assert!(matches!(e, DiagramError::UnknownRole { .. }), "{e}");
    }
}
