//! upshot's own diagram syntax.
//!
//! ```text
//! # comments run to the end of the line
//! zone -> voucher -> app_sessions -> spend_30d   # a chain declares every edge along it
//! prior_orders, zone -> spend_30d                # a comma list expands to every pair
//! voucher <- mail_wave; voucher <-> spend_30d    # `<-` points back; `<->` is a latent common cause
//! income: latent continuous                      # declarations: role and kind words
//! "order value" -> spend_30d                     # names that are not identifiers are quoted
//! ```
//! Statements end at a new line or `;`.

use crate::cursor::Parser;
use crate::diagram::{Diagram, DiagramError, Span};

#[derive(Clone, Debug, PartialEq)]
enum Tok {
    Name(String),
    Forward,
    Backward,
    Both,
    Undirected,
    Comma,
    Colon,
    End, // ';' or new line
    Eof,
}

fn describe(t: &Tok) -> String {
    match t {
        Tok::Name(n) => format!("`{n}`"),
        Tok::Forward => "`->`".into(),
        Tok::Backward => "`<-`".into(),
        Tok::Both => "`<->`".into(),
        Tok::Undirected => "`--`".into(),
        Tok::Comma => "`,`".into(),
        Tok::Colon => "`:`".into(),
        Tok::End => "the end of the statement".into(),
        Tok::Eof => "the end of the text".into(),
    }
}

/// Whether `name` can be written without quotes.
pub fn is_plain_identifier(name: &str) -> bool {
    let mut cs = name.chars();
    matches!(cs.next(), Some(c) if c.is_alphabetic() || c == '_')
        && cs.all(|c| c.is_alphanumeric() || c == '_')
}

fn lex(text: &str) -> Result<Vec<(Tok, Span)>, DiagramError> {
    let chars: Vec<char> = text.chars().collect();
    let mut out = Vec::new();
    let (mut i, mut line, mut col) = (0usize, 1usize, 1usize);
    let err = |line, col, message: String| DiagramError::Syntax {
        span: Span { line, col },
        message,
    };
    while i < chars.len() {
        let c = chars[i];
        let span = Span { line, col };
        let adv = |n: usize, i: &mut usize, col: &mut usize| {
            *i += n;
            *col += n;
        };
        match c {
            '\n' => {
                out.push((Tok::End, span));
                i += 1;
                line += 1;
                col = 1;
            }
            ' ' | '\t' | '\r' => adv(1, &mut i, &mut col),
            '#' => {
                while i < chars.len() && chars[i] != '\n' {
                    i += 1;
                }
            }
            ';' => {
                out.push((Tok::End, span));
                adv(1, &mut i, &mut col);
            }
            ',' => {
                out.push((Tok::Comma, span));
                adv(1, &mut i, &mut col);
            }
            ':' => {
                out.push((Tok::Colon, span));
                adv(1, &mut i, &mut col);
            }
            '-' if chars.get(i + 1) == Some(&'>') => {
                out.push((Tok::Forward, span));
                adv(2, &mut i, &mut col);
            }
            '-' if chars.get(i + 1) == Some(&'-') => {
                out.push((Tok::Undirected, span));
                adv(2, &mut i, &mut col);
            }
            '<' if chars.get(i + 1) == Some(&'-') && chars.get(i + 2) == Some(&'>') => {
                out.push((Tok::Both, span));
                adv(3, &mut i, &mut col);
            }
            '<' if chars.get(i + 1) == Some(&'-') => {
                out.push((Tok::Backward, span));
                adv(2, &mut i, &mut col);
            }
            '"' => {
                let mut s = String::new();
                adv(1, &mut i, &mut col);
                loop {
                    match chars.get(i) {
                        None | Some('\n') => {
                            return Err(err(
                                span.line,
                                span.col,
                                "unterminated quoted name: add the closing `\"` on the same line".into(),
                            ))
                        }
                        Some('"') => {
                            adv(1, &mut i, &mut col);
                            break;
                        }
                        Some('\\') if matches!(chars.get(i + 1), Some('"') | Some('\\')) => {
                            s.push(chars[i + 1]);
                            adv(2, &mut i, &mut col);
                        }
                        Some(&ch) => {
                            s.push(ch);
                            adv(1, &mut i, &mut col);
                        }
                    }
                }
                if s.is_empty() {
                    return Err(err(span.line, span.col, "empty quoted name `\"\"`".into()));
                }
                out.push((Tok::Name(s), span));
            }
            c if c.is_alphanumeric() || c == '_' => {
                let start = i;
                while i < chars.len() && (chars[i].is_alphanumeric() || chars[i] == '_') {
                    i += 1;
                }
                col += i - start;
                let word: String = chars[start..i].iter().collect();
                if word.chars().next().is_some_and(|c| c.is_numeric()) {
                    return Err(err(
                        span.line,
                        span.col,
                        format!("`{word}` starts with a digit; quote it as \"{word}\" to use it as a name"),
                    ));
                }
                out.push((Tok::Name(word), span));
            }
            other => {
                return Err(err(
                    line,
                    col,
                    format!(
                        "unexpected character `{other}`; expected a name, `->`, `<-`, `<->`, `,`, `:`, `;` or `#`"
                    ),
                ))
            }
        }
    }
    out.push((Tok::Eof, Span { line, col }));
    Ok(out)
}

impl Parser<Tok> {
    fn syntax(span: Span, message: String) -> DiagramError {
        DiagramError::Syntax { span, message }
    }

    /// name (',' name)*
    fn group(&mut self, after: Option<&str>) -> Result<Vec<(usize, Span)>, DiagramError> {
        let mut g = Vec::new();
        loop {
            match self.bump() {
                (Tok::Name(n), span) => g.push((self.b.node(&n, span), span)),
                (t, span) => {
                    let ctx = match after {
                        Some(a) => format!(" after {a}"),
                        None => String::new(),
                    };
                    return Err(Self::syntax(
                        span,
                        format!("expected a variable name{ctx}, found {}", describe(&t)),
                    ));
                }
            }
            if self.peek().0 == Tok::Comma {
                self.bump();
            } else {
                return Ok(g);
            }
        }
    }

    fn statement(&mut self) -> Result<(), DiagramError> {
        let mut left = self.group(None)?;
        match self.peek().0.clone() {
            Tok::Colon => {
                self.bump();
                let mut any = false;
                loop {
                    match self.peek().clone() {
                        (Tok::Name(w), span) => {
                            self.bump();
                            for &(n, _) in &left {
                                self.b.declare(n, &w, span)?;
                            }
                            any = true;
                        }
                        (Tok::Comma, _) if any => {
                            self.bump();
                        }
                        (t, span) => {
                            if any && matches!(t, Tok::End | Tok::Eof) {
                                return Ok(());
                            }
                            return Err(Self::syntax(
                                span,
                                format!(
                                    "expected a role or kind after `:` ({}), found {}",
                                    crate::diagram::ATTRIBUTE_WORDS.join(", "),
                                    describe(&t)
                                ),
                            ));
                        }
                    }
                }
            }
            _ => loop {
                let (arrow, span) = self.peek().clone();
                match arrow {
                    Tok::Forward | Tok::Backward | Tok::Both => {
                        self.bump();
                        let word = describe(&arrow);
                        let right = self.group(Some(&word))?;
                        for &(a, _) in &left {
                            for &(b, _) in &right {
                                match arrow {
                                    Tok::Forward => self.b.edge(a, b, span)?,
                                    Tok::Backward => self.b.edge(b, a, span)?,
                                    _ => self.b.confounded(a, b, span)?,
                                }
                            }
                        }
                        left = right;
                    }
                    Tok::Undirected => {
                        return Err(Self::syntax(
                            span,
                            "undirected edge `--`: a causal diagram needs a direction; write `a -> b`, or `a <-> b` for a latent common cause".into(),
                        ))
                    }
                    Tok::End | Tok::Eof => return Ok(()),
                    t => {
                        return Err(Self::syntax(
                            span,
                            format!(
                                "expected `->`, `<-`, `<->`, `:`, `;` or a new line, found {}",
                                describe(&t)
                            ),
                        ))
                    }
                }
            },
        }
    }
}

/// Parses the edge syntax described in the module documentation.
pub fn parse(text: &str) -> Result<Diagram, DiagramError> {
    let mut p = Parser::new(lex(text)?);
    loop {
        match p.peek().0 {
            Tok::Eof => break,
            Tok::End => {
                p.bump();
            }
            _ => p.statement()?,
        }
    }
    p.b.finish()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diagram::{Kind, Role};

    #[test]
    fn chains_groups_and_declarations() {
        let d = parse(
            "# demo\nzone, prior_orders -> voucher -> spend ; mail_wave -> voucher\nspend <- zone\nincome: latent continuous\nincome -> voucher\n\"order value\" -> spend\nvoucher <-> spend",
        )
        .unwrap();
        let g = d.dag();
        let i = |n: &str| d.index_of(n).unwrap();
        assert!(g.has_edge(i("zone"), i("voucher")));
        assert!(g.has_edge(i("prior_orders"), i("voucher")));
        assert!(g.has_edge(i("voucher"), i("spend")));
        assert!(g.has_edge(i("zone"), i("spend")));
        assert!(g.has_edge(i("order value"), i("spend")));
        assert_eq!(d.node(i("income")).role, Role::Latent);
        assert_eq!(d.node(i("income")).kind, Kind::Continuous);
        let l = i("voucher <-> spend");
        assert!(d.is_latent(l));
        assert!(g.has_edge(l, i("voucher")) && g.has_edge(l, i("spend")));
        // Display round-trips.
        let again = parse(&d.to_string()).unwrap();
        assert_eq!(again.dag().edge_count(), d.dag().edge_count());
        assert_eq!(again.len(), d.len());
    }

    fn err(text: &str) -> DiagramError {
        parse(text).unwrap_err()
    }

    #[test]
    fn errors_carry_positions() {
        let e = err("a -> b\nb -> c\nc -> a\n");
        assert!(
            matches!(&e, DiagramError::Cycle { span, cycle } if span.line == 3 && cycle.len() == 4),
            "{e}"
        );
        assert!(e.to_string().contains("a -> b -> c -> a"), "{e}");
        let e = err("a -> a");
        assert!(
            matches!(
                e,
                DiagramError::SelfLoop {
                    span: Span { line: 1, col: 3 },
                    ..
                }
            ),
            "{e}"
        );
        let e = err("a -> b\n  a -> b");
        assert!(
            matches!(
                e,
                DiagramError::DuplicateEdge {
                    span: Span { line: 2, col: 5 },
                    ..
                }
            ),
            "{e}"
        );
        assert!(e.to_string().contains("first declared at line 1, column 3"));
        let e = err("x: hidden");
        assert!(
            matches!(&e, DiagramError::UnknownRole { word, .. } if word == "hidden"),
            "{e}"
        );
        assert!(e.to_string().contains("expected one of: observed, latent"));
        let e = err("x: latent\nx: observed");
        assert!(matches!(e, DiagramError::Conflict { .. }), "{e}");
        let e = err("a -> ");
        assert_eq!(e.span(), Some(Span { line: 1, col: 6 }));
        assert!(
            e.to_string()
                .contains("expected a variable name after `->`"),
            "{e}"
        );
        let e = err("a -- b");
        assert!(e.to_string().contains("undirected"), "{e}");
        let e = err("a -> b c");
        assert!(e.to_string().contains("found `c`"), "{e}");
        let e = err("a => b");
        assert_eq!(e.span(), Some(Span { line: 1, col: 3 }));
        let e = err("\"open");
        assert!(e.to_string().contains("unterminated"), "{e}");
        assert_eq!(err("# nothing\n"), DiagramError::Empty);
        let e = err("2y -> a");
        assert!(e.to_string().contains("quote it"), "{e}");
        let e = err("a <-> b\nb <-> a");
        assert!(matches!(e, DiagramError::DuplicateEdge { .. }), "{e}");
    }
}
