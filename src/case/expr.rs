//! Rational expressions in the Laplace variable `s`, as written in case
//! files: `38 / ((0.42*s + 1) * (0.004*s + 1))`, `kp * (s + wi) / s`.
//!
//! An expression is parsed once into an [`Expr`] and can then be evaluated
//! many times with different parameter values (nominal values, corners of
//! the uncertainty box, random samples) into a numerator and a denominator
//! polynomial.
//!
//! Grammar (usual precedence, `^` binds tighter than unary minus, so
//! `-s^2` is `-(s^2)`):
//!
//! ```text
//! sum     := product (('+' | '-') product)*
//! product := unary (('*' | '/') unary)*
//! unary   := '-' unary | power
//! power   := primary ('^' INTEGER)?
//! primary := NUMBER | 's' | IDENT | '(' sum ')'
//! ```
//!
//! The arithmetic is exact rational arithmetic on polynomials:
//! `a/b + c/d = (a d + b c) / (b d)`, `(a/b) / (c/d) = (a d) / (b c)`.
//! Common factors are never cancelled: a pole-zero pair the user wrote
//! stays in the model, because cancelling an unstable pole hides a loop
//! that cannot work.
//!
//! Parsing and evaluation never panic and never recurse without bound:
//! nesting (parentheses and unary minus) is capped at [`MAX_DEPTH`], and
//! chains like `1+1+1+...` are stored flat rather than as a deep tree.

use crate::model::poly::Poly;
use std::fmt;

/// Deepest nesting of parentheses and unary minus accepted. Real models
/// need a handful of levels; the cap keeps the recursive parser and
/// evaluator far from the stack limit on hostile input.
pub const MAX_DEPTH: usize = 256;

/// Largest exponent accepted after `^`.
pub const MAX_EXPONENT: u32 = 64;

/// Largest polynomial degree an evaluation may produce. Loop models have
/// orders in the tens; the cap bounds the work a short input can demand
/// (`((s+1)^64)^64` would otherwise be a degree-4096 product).
pub const MAX_DEGREE: usize = 256;

/// A parse or evaluation error, located at a 1-based column counted in
/// characters (not bytes) of the expression text.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("column {column}: {message}")]
pub struct ExprError {
    /// 1-based column, in characters, of the offending spot.
    pub column: usize,
    /// What is wrong there.
    pub message: String,
}

impl ExprError {
    fn new(column: usize, message: impl Into<String>) -> Self {
        ExprError {
            column,
            message: message.into(),
        }
    }

    /// A line that puts a `^` under this error's column of `text`, keeping
    /// any tabs of `text` so the caret lines up in a terminal.
    pub fn caret_line(&self, text: &str) -> String {
        let mut line: String = text
            .chars()
            .take(self.column.saturating_sub(1))
            .map(|c| if c == '\t' { '\t' } else { ' ' })
            .collect();
        // Past the end (missing operand at the end of the text): pad.
        let have = line.chars().count();
        for _ in have..self.column.saturating_sub(1) {
            line.push(' ');
        }
        line.push('^');
        line
    }
}

/// A parsed rational expression in `s`.
#[derive(Debug, Clone, PartialEq)]
pub struct Expr {
    source: String,
    root: Node,
    /// Each identifier once, in order of first use, with that column.
    idents: Vec<(String, usize)>,
}

#[derive(Debug, Clone, PartialEq)]
struct Node {
    kind: Kind,
    /// Column the node starts at (numbers, names, unary minus, `(`).
    col: usize,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum AddOp {
    Add,
    Sub,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum MulOp {
    Mul,
    Div,
}

/// The operators after a first operand, each with its column and operand.
type Chain<Op> = Vec<(Op, usize, Node)>;

#[derive(Debug, Clone, PartialEq)]
enum Kind {
    Num(f64),
    /// The Laplace variable `s`.
    Var,
    Param(String),
    Neg(Box<Node>),
    /// `first (op term)*`; each op keeps its column for error messages.
    Sum(Box<Node>, Chain<AddOp>),
    Product(Box<Node>, Chain<MulOp>),
    /// Base, exponent, column of the `^`.
    Pow(Box<Node>, u32, usize),
}

#[derive(Debug, Clone, PartialEq)]
enum Tok {
    /// Value, and whether the literal is a plain digit string (the only
    /// form accepted as an exponent).
    Num(f64, bool),
    Ident(String),
    Plus,
    Minus,
    Star,
    Slash,
    Caret,
    LParen,
    RParen,
}

#[derive(Debug, Clone)]
struct Token {
    tok: Tok,
    col: usize,
    /// The token as written, for messages.
    text: String,
}

fn lex(chars: &[char]) -> Result<Vec<Token>, ExprError> {
    let mut out = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        let c = chars[i];
        let col = i + 1;
        if c.is_whitespace() {
            i += 1;
            continue;
        }
        let single = match c {
            '+' => Some(Tok::Plus),
            '-' => Some(Tok::Minus),
            '*' => Some(Tok::Star),
            '/' => Some(Tok::Slash),
            '^' => Some(Tok::Caret),
            '(' => Some(Tok::LParen),
            ')' => Some(Tok::RParen),
            _ => None,
        };
        if c == '*' && chars.get(i + 1) == Some(&'*') {
            return Err(ExprError::new(
                col + 1,
                "`**` is not a power here: use `^`, e.g. s^2",
            ));
        }
        if let Some(tok) = single {
            out.push(Token {
                tok,
                col,
                text: c.to_string(),
            });
            i += 1;
            continue;
        }
        if c.is_ascii_digit() || c == '.' {
            let start = i;
            let mut digits = 0;
            while i < chars.len() && chars[i].is_ascii_digit() {
                i += 1;
                digits += 1;
            }
            let mut plain = true;
            if i < chars.len() && chars[i] == '.' {
                plain = false;
                i += 1;
                while i < chars.len() && chars[i].is_ascii_digit() {
                    i += 1;
                    digits += 1;
                }
            }
            if digits == 0 {
                return Err(ExprError::new(col, "a lone `.` is not a number"));
            }
            if i < chars.len() && (chars[i] == 'e' || chars[i] == 'E') {
                plain = false;
                let e_col = i + 1;
                i += 1;
                if i < chars.len() && (chars[i] == '+' || chars[i] == '-') {
                    i += 1;
                }
                let exp_start = i;
                while i < chars.len() && chars[i].is_ascii_digit() {
                    i += 1;
                }
                if i == exp_start {
                    return Err(ExprError::new(
                        e_col,
                        "malformed number: `e` must be followed by the exponent's digits",
                    ));
                }
            }
            let text: String = chars[start..i].iter().collect();
            let value: f64 = text
                .parse()
                .map_err(|_| ExprError::new(col, format!("malformed number `{text}`")))?;
            if !value.is_finite() {
                return Err(ExprError::new(
                    col,
                    format!("number `{text}` overflows to infinity"),
                ));
            }
            out.push(Token {
                tok: Tok::Num(value, plain),
                col,
                text,
            });
            continue;
        }
        if c.is_ascii_alphabetic() || c == '_' {
            let start = i;
            while i < chars.len() && (chars[i].is_ascii_alphanumeric() || chars[i] == '_') {
                i += 1;
            }
            let text: String = chars[start..i].iter().collect();
            out.push(Token {
                tok: Tok::Ident(text.clone()),
                col,
                text,
            });
            continue;
        }
        return Err(ExprError::new(col, format!("unexpected character `{c}`")));
    }
    Ok(out)
}

struct Parser {
    tokens: Vec<Token>,
    pos: usize,
    /// Column just past the last character (where a missing operand at
    /// the end is reported).
    end_col: usize,
    depth: usize,
    idents: Vec<(String, usize)>,
}

impl Parser {
    fn peek(&self) -> Option<&Token> {
        self.tokens.get(self.pos)
    }

    fn enter(&mut self, col: usize) -> Result<(), ExprError> {
        self.depth += 1;
        if self.depth > MAX_DEPTH {
            return Err(ExprError::new(
                col,
                format!("nested more than {MAX_DEPTH} levels deep"),
            ));
        }
        Ok(())
    }

    fn sum(&mut self) -> Result<Node, ExprError> {
        self.chain(
            Self::product,
            |t| match t {
                Tok::Plus => Some(AddOp::Add),
                Tok::Minus => Some(AddOp::Sub),
                _ => None,
            },
            Kind::Sum,
        )
    }

    fn product(&mut self) -> Result<Node, ExprError> {
        self.chain(
            Self::unary,
            |t| match t {
                Tok::Star => Some(MulOp::Mul),
                Tok::Slash => Some(MulOp::Div),
                _ => None,
            },
            Kind::Product,
        )
    }

    /// One left-associative level of the grammar: an operand, then any
    /// number of (operator, operand) pairs whose operator `op_of` accepts;
    /// a single operand is returned as it is.
    fn chain<Op>(
        &mut self,
        operand: fn(&mut Self) -> Result<Node, ExprError>,
        op_of: fn(&Tok) -> Option<Op>,
        build: fn(Box<Node>, Chain<Op>) -> Kind,
    ) -> Result<Node, ExprError> {
        let first = operand(self)?;
        let mut rest = Vec::new();
        while let Some(t) = self.peek() {
            let Some(op) = op_of(&t.tok) else { break };
            let col = t.col;
            self.pos += 1;
            rest.push((op, col, self.operand_after(operand)?));
        }
        if rest.is_empty() {
            return Ok(first);
        }
        let col = first.col;
        Ok(Node {
            kind: build(Box::new(first), rest),
            col,
        })
    }

    /// Parses the operand of the operator just consumed, turning "no
    /// operand here" into an error that names the operator.
    fn operand_after(
        &mut self,
        f: fn(&mut Self) -> Result<Node, ExprError>,
    ) -> Result<Node, ExprError> {
        if self.starts_operand() {
            f(self)
        } else {
            let op = self
                .pos
                .checked_sub(1)
                .and_then(|i| self.tokens.get(i))
                .map_or(String::new(), |t| t.text.clone());
            Err(self.missing_operand(&format!("after `{op}`")))
        }
    }

    fn starts_operand(&self) -> bool {
        matches!(
            self.peek().map(|t| &t.tok),
            Some(Tok::Num(..) | Tok::Ident(_) | Tok::LParen | Tok::Minus)
        )
    }

    fn missing_operand(&self, what: &str) -> ExprError {
        match self.peek() {
            None => ExprError::new(self.end_col, format!("missing operand {what}")),
            Some(t) => ExprError::new(t.col, format!("missing operand {what}: found `{}`", t.text)),
        }
    }

    fn unary(&mut self) -> Result<Node, ExprError> {
        if let Some(t) = self.peek()
            && t.tok == Tok::Minus
        {
            let col = t.col;
            self.pos += 1;
            self.enter(col)?;
            let inner = self.operand_after(Self::unary)?;
            self.depth -= 1;
            return Ok(Node {
                kind: Kind::Neg(Box::new(inner)),
                col,
            });
        }
        self.power()
    }

    fn power(&mut self) -> Result<Node, ExprError> {
        let base = self.primary()?;
        let Some(t) = self.peek() else {
            return Ok(base);
        };
        if t.tok != Tok::Caret {
            return Ok(base);
        }
        let caret_col = t.col;
        self.pos += 1;
        let n = match self.peek() {
            None => {
                return Err(ExprError::new(self.end_col, "missing exponent after `^`"));
            }
            Some(Token {
                tok: Tok::Num(v, true),
                col,
                text,
            }) => {
                if *v > f64::from(MAX_EXPONENT) {
                    return Err(ExprError::new(
                        *col,
                        format!("bad exponent `{text}`: at most {MAX_EXPONENT}"),
                    ));
                }
                *v as u32
            }
            Some(Token {
                tok: Tok::Num(_, false),
                col,
                text,
            }) => {
                return Err(ExprError::new(
                    *col,
                    format!("bad exponent `{text}`: must be a whole number written as digits"),
                ));
            }
            Some(Token {
                tok: Tok::Minus,
                col,
                ..
            }) => {
                return Err(ExprError::new(
                    *col,
                    "bad exponent: negative powers are not allowed; divide instead",
                ));
            }
            Some(t) => {
                return Err(ExprError::new(
                    t.col,
                    format!(
                        "bad exponent `{}`: must be a literal whole number from 0 to {MAX_EXPONENT}",
                        t.text
                    ),
                ));
            }
        };
        self.pos += 1;
        if let Some(t) = self.peek()
            && t.tok == Tok::Caret
        {
            return Err(ExprError::new(
                t.col,
                "bad exponent: chained `^`; use parentheses, e.g. `(s^2)^3`",
            ));
        }
        let col = base.col;
        Ok(Node {
            kind: Kind::Pow(Box::new(base), n, caret_col),
            col,
        })
    }

    fn primary(&mut self) -> Result<Node, ExprError> {
        let Some(t) = self.peek().cloned() else {
            return Err(ExprError::new(self.end_col, "missing operand at the end"));
        };
        self.pos += 1;
        let node = match t.tok {
            Tok::Num(v, _) => Node {
                kind: Kind::Num(v),
                col: t.col,
            },
            Tok::Ident(name) if name == "s" => Node {
                kind: Kind::Var,
                col: t.col,
            },
            Tok::Ident(name) if name == PI_NAME => Node {
                kind: Kind::Num(std::f64::consts::PI),
                col: t.col,
            },
            Tok::Ident(name)
                if matches!(self.peek().map(|t| &t.tok), Some(Tok::LParen))
                    && FUNCTION_NAMES.contains(&name.as_str()) =>
            {
                return Err(ExprError::new(t.col, function_hint(&name)));
            }
            Tok::Ident(name) => {
                if !self.idents.iter().any(|(n, _)| *n == name) {
                    self.idents.push((name.clone(), t.col));
                }
                Node {
                    kind: Kind::Param(name),
                    col: t.col,
                }
            }
            Tok::LParen => {
                self.enter(t.col)?;
                if matches!(self.peek().map(|t| &t.tok), Some(Tok::RParen)) {
                    return Err(ExprError::new(t.col, "empty parentheses `()`"));
                }
                let inner = self.sum()?;
                match self.peek() {
                    Some(Token {
                        tok: Tok::RParen, ..
                    }) => self.pos += 1,
                    Some(other) => {
                        let msg = match other.tok {
                            // `(2s + 1)`: the same words as outside parentheses.
                            Tok::Num(..) | Tok::Ident(_) | Tok::LParen => format!(
                                "unexpected `{}`: write `*` between factors (no implicit multiplication)",
                                other.text
                            ),
                            _ => format!("expected `)` or an operator, found `{}`", other.text),
                        };
                        return Err(ExprError::new(other.col, msg));
                    }
                    None => {
                        return Err(ExprError::new(
                            t.col,
                            "unbalanced parentheses: this `(` is never closed",
                        ));
                    }
                }
                self.depth -= 1;
                // Keep the `(` column: errors about the group point at it.
                Node {
                    kind: inner.kind,
                    col: t.col,
                }
            }
            Tok::RParen => {
                return Err(ExprError::new(
                    t.col,
                    "unbalanced parentheses: `)` without a matching `(`",
                ));
            }
            _ => {
                return Err(ExprError::new(
                    t.col,
                    format!("missing operand before `{}`", t.text),
                ));
            }
        };
        Ok(node)
    }
}

/// The one built-in constant, pi (3.14159...), so that `2*pi*50` reads as
/// written; it cannot be declared as a parameter.
pub const PI_NAME: &str = "pi";

/// Function names a user may reach for; none is rational in `s`.
const FUNCTION_NAMES: [&str; 6] = ["exp", "sqrt", "sin", "cos", "log", "ln"];

/// What to write instead of a function call.
fn function_hint(name: &str) -> String {
    if name == "exp" {
        "`exp(...)` is not rational in s: give a pure delay e^(-sL) as `delay_s = L` under [plant] or [sensor]".to_string()
    } else {
        format!(
            "`{name}(...)`: only +, -, *, / and ^ with whole exponents are allowed (compute the number and write it, or declare it under [params])"
        )
    }
}

/// The message for an identifier that has no value.
pub fn unbound_message(name: &str) -> String {
    if name == "z" {
        "`z` in an expression in s: a controller in z is given as `numerator_z`, `denominator_z` and `rate_hz` under [controller]".to_string()
    } else {
        format!("unbound identifier `{name}`")
    }
}

/// Numerator and denominator during evaluation.
struct Rat {
    numerator: Poly,
    denominator: Poly,
}

fn check_degree(col: usize, degree: usize) -> Result<(), ExprError> {
    if degree > MAX_DEGREE {
        return Err(ExprError::new(
            col,
            format!("polynomial degree {degree} is above the limit of {MAX_DEGREE}"),
        ));
    }
    Ok(())
}

fn mul_checked(col: usize, a: &Poly, b: &Poly) -> Result<Poly, ExprError> {
    check_degree(col, a.degree() + b.degree())?;
    Ok(a.mul(b))
}

fn finish(col: usize, r: Rat) -> Result<Rat, ExprError> {
    if !r.numerator.is_finite() || !r.denominator.is_finite() {
        return Err(ExprError::new(
            col,
            "a coefficient overflows here (not a finite number)",
        ));
    }
    if r.denominator.is_zero() {
        return Err(ExprError::new(
            col,
            "the denominator underflows to the zero polynomial here",
        ));
    }
    Ok(r)
}

fn eval_node(node: &Node, lookup: &dyn Fn(&str) -> Option<f64>) -> Result<Rat, ExprError> {
    let r = match &node.kind {
        Kind::Num(v) => Rat {
            numerator: Poly::constant(*v),
            denominator: Poly::one(),
        },
        Kind::Var => Rat {
            numerator: Poly::var(),
            denominator: Poly::one(),
        },
        Kind::Param(name) => {
            let v = lookup(name).ok_or_else(|| ExprError::new(node.col, unbound_message(name)))?;
            if !v.is_finite() {
                return Err(ExprError::new(
                    node.col,
                    format!("parameter `{name}` has the non-finite value {v}"),
                ));
            }
            Rat {
                numerator: Poly::constant(v),
                denominator: Poly::one(),
            }
        }
        Kind::Neg(inner) => {
            let r = eval_node(inner, lookup)?;
            Rat {
                numerator: r.numerator.scale(-1.0),
                denominator: r.denominator,
            }
        }
        Kind::Sum(first, rest) => {
            let mut acc = eval_node(first, lookup)?;
            for (op, col, term) in rest {
                let t = eval_node(term, lookup)?;
                let ad = mul_checked(*col, &acc.numerator, &t.denominator)?;
                let bc = mul_checked(*col, &t.numerator, &acc.denominator)?;
                let num = match op {
                    AddOp::Add => ad.add(&bc),
                    AddOp::Sub => ad.sub(&bc),
                };
                let den = mul_checked(*col, &acc.denominator, &t.denominator)?;
                acc = finish(
                    *col,
                    Rat {
                        numerator: num,
                        denominator: den,
                    },
                )?;
            }
            acc
        }
        Kind::Product(first, rest) => {
            let mut acc = eval_node(first, lookup)?;
            for (op, col, factor) in rest {
                let f = eval_node(factor, lookup)?;
                let (num, den) = match op {
                    MulOp::Mul => (
                        mul_checked(*col, &acc.numerator, &f.numerator)?,
                        mul_checked(*col, &acc.denominator, &f.denominator)?,
                    ),
                    MulOp::Div => {
                        if f.numerator.is_zero() {
                            return Err(ExprError::new(
                                *col,
                                "division by zero (the divisor is the zero polynomial)",
                            ));
                        }
                        (
                            mul_checked(*col, &acc.numerator, &f.denominator)?,
                            mul_checked(*col, &acc.denominator, &f.numerator)?,
                        )
                    }
                };
                acc = finish(
                    *col,
                    Rat {
                        numerator: num,
                        denominator: den,
                    },
                )?;
            }
            acc
        }
        Kind::Pow(base, n, col) => {
            let b = eval_node(base, lookup)?;
            let n_us = *n as usize;
            check_degree(
                *col,
                b.numerator.degree().max(b.denominator.degree()) * n_us,
            )?;
            Rat {
                numerator: b.numerator.pow(*n),
                denominator: b.denominator.pow(*n),
            }
        }
    };
    finish(node.col, r)
}

impl Expr {
    /// Parses `text`. Errors name the 1-based character column.
    pub fn parse(text: &str) -> Result<Expr, ExprError> {
        let chars: Vec<char> = text.chars().collect();
        let tokens = lex(&chars)?;
        if tokens.is_empty() {
            return Err(ExprError::new(1, "empty expression"));
        }
        let mut p = Parser {
            tokens,
            pos: 0,
            end_col: chars.len() + 1,
            depth: 0,
            idents: Vec::new(),
        };
        let root = p.sum()?;
        if let Some(t) = p.peek() {
            let msg = match t.tok {
                Tok::RParen => "unbalanced parentheses: `)` without a matching `(`".to_string(),
                Tok::Num(..) | Tok::Ident(_) | Tok::LParen => format!(
                    "unexpected `{}`: write `*` between factors (no implicit multiplication)",
                    t.text
                ),
                _ => format!("unexpected `{}`", t.text),
            };
            return Err(ExprError::new(t.col, msg));
        }
        Ok(Expr {
            source: text.to_string(),
            root,
            idents: p.idents,
        })
    }

    /// The text this expression was parsed from.
    pub fn source(&self) -> &str {
        &self.source
    }

    /// The parameter names used (every identifier other than `s`), each
    /// once, in order of first appearance.
    pub fn identifiers(&self) -> Vec<String> {
        self.idents.iter().map(|(n, _)| n.clone()).collect()
    }

    /// 1-based column of the first use of identifier `name`, if used.
    pub fn identifier_column(&self, name: &str) -> Option<usize> {
        self.idents.iter().find(|(n, _)| n == name).map(|&(_, c)| c)
    }

    /// Evaluates to `(numerator, denominator)` in ascending powers of `s`,
    /// looking parameter values up by name. An unbound name, a
    /// non-finite value, division by the zero polynomial, an overflowing
    /// coefficient or a degree above [`MAX_DEGREE`] is an error located at
    /// the column responsible.
    pub fn eval(&self, lookup: &dyn Fn(&str) -> Option<f64>) -> Result<(Poly, Poly), ExprError> {
        let r = eval_node(&self.root, lookup)?;
        Ok((r.numerator, r.denominator))
    }

    /// [`Expr::eval`] with values given as `names[i] = values[i]`.
    pub fn eval_with(&self, names: &[&str], values: &[f64]) -> Result<(Poly, Poly), ExprError> {
        self.eval(&|n: &str| {
            names
                .iter()
                .position(|&x| x == n)
                .and_then(|i| values.get(i).copied())
        })
    }
}

impl fmt::Display for Expr {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.source)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn eval0(text: &str) -> (Vec<f64>, Vec<f64>) {
        let (n, d) = Expr::parse(text).unwrap().eval(&|_| None).unwrap();
        (n.coeffs().to_vec(), d.coeffs().to_vec())
    }

    fn err(text: &str) -> ExprError {
        match Expr::parse(text) {
            Err(e) => e,
            Ok(e) => e.eval(&|_| Some(1.0)).unwrap_err(),
        }
    }

    #[test]
    fn numbers() {
        assert_eq!(eval0("2").0, vec![2.0]);
        assert_eq!(eval0("0.5").0, vec![0.5]);
        assert_eq!(eval0("1e-3").0, vec![1e-3]);
        assert_eq!(eval0(".5").0, vec![0.5]);
        assert_eq!(eval0("2.").0, vec![2.0]);
        assert_eq!(eval0("1.5E2").0, vec![150.0]);
    }

    #[test]
    fn precedence_and_unary_minus() {
        // -s^2 + 3*s - 1: coefficients [-1, 3, -1] ascending.
        assert_eq!(eval0("-s^2 + 3*s - 1"), (vec![-1.0, 3.0, -1.0], vec![1.0]));
        // 2 - 3 - 4 is left-associative: -5.
        assert_eq!(eval0("2 - 3 - 4").0, vec![-5.0]);
        // 8 / 2 / 2 = 2 kept as num 8, den 4 (no cancellation of constants
        // either: the ratio is what matters).
        assert_eq!(eval0("8 / 2 / 2"), (vec![8.0], vec![4.0]));
        assert_eq!(eval0("--s").0, vec![0.0, 1.0]);
        assert_eq!(eval0("(s+1)^0"), (vec![1.0], vec![1.0]));
    }

    #[test]
    fn rational_arithmetic_keeps_common_factors() {
        // 1/(s+1) + 1/(s+1) = (2s + 2) / (s+1)^2, nothing cancelled.
        let (n, d) = eval0("1/(s+1) + 1/(s+1)");
        assert_eq!(n, vec![2.0, 2.0]);
        assert_eq!(d, vec![1.0, 2.0, 1.0]);
        // (s/(s+2)) / (s/(s+3)) = s (s+3) / ((s+2) s).
        let (n, d) = eval0("(s/(s+2)) / (s/(s+3))");
        assert_eq!(n, vec![0.0, 3.0, 1.0]);
        assert_eq!(d, vec![0.0, 2.0, 1.0]);
    }

    #[test]
    fn parameters() {
        let e = Expr::parse("k * (s + wi) / s + k").unwrap();
        assert_eq!(e.identifiers(), vec!["k".to_string(), "wi".to_string()]);
        assert_eq!(e.identifier_column("wi"), Some(10));
        let (n, d) = e.eval_with(&["k", "wi"], &[2.0, 5.0]).unwrap();
        // 2 (s + 5) / s + 2 = (2s + 10 + 2s) / s.
        assert_eq!(n.coeffs(), &[10.0, 4.0]);
        assert_eq!(d.coeffs(), &[0.0, 1.0]);
        let e2 = e.eval_with(&["k"], &[2.0]).unwrap_err();
        assert_eq!(e2.column, 10);
        assert!(e2.message.contains("`wi`"));
        let e3 = e.eval_with(&["k", "wi"], &[f64::NAN, 1.0]).unwrap_err();
        assert_eq!(e3.column, 1);
    }

    #[test]
    fn error_columns() {
        let cases: &[(&str, usize, &str)] = &[
            ("", 1, "empty"),
            ("   ", 1, "empty"),
            ("2 $ 3", 3, "unexpected character"),
            ("(2 + s", 1, "never closed"),
            ("2 + s)", 6, "without a matching"),
            ("2 +", 4, "missing operand"),
            ("2 + * 3", 5, "missing operand"),
            ("* 3", 1, "missing operand"),
            ("s^-1", 3, "negative"),
            ("s^0.5", 3, "whole number"),
            ("s^65", 3, "at most 64"),
            ("s^k", 3, "literal"),
            ("s^(2)", 3, "literal"),
            ("s^1e1", 3, "whole number"),
            ("s^2^3", 4, "chained"),
            ("1 / (s - s)", 3, "division by zero"),
            ("1e999", 1, "overflows"),
            ("1e", 2, "malformed"),
            (".", 1, "lone"),
            ("2 s", 3, "implicit"),
            ("7.54(s+1)", 5, "write `*` between factors"),
            ("1/(2s+1)", 5, "write `*` between factors"),
            ("(s (s+1))", 4, "write `*` between factors"),
            ("(s + 1 +)", 9, "missing operand"),
            ("1/(s**2+1)", 6, "use `^`"),
            ("exp(-0.1*s)/(s+1)", 1, "delay_s"),
            ("sqrt(2)*s", 1, "only +, -, *, / and ^"),
            ("()", 1, "empty parentheses"),
            ("é", 1, "unexpected character"),
            ("\u{a0}\u{a0}2 $", 5, "unexpected character"),
            ("1e300 * 1e300", 7, "overflows"),
            ("((s+1)^64)^64", 11, "degree"),
        ];
        for &(text, col, frag) in cases {
            let e = err(text);
            assert_eq!(e.column, col, "{text:?}: {e}");
            assert!(e.message.contains(frag), "{text:?}: {e}");
        }
    }

    #[test]
    fn depth_is_capped() {
        let ok = format!("{}s{}", "(".repeat(MAX_DEPTH), ")".repeat(MAX_DEPTH));
        assert!(Expr::parse(&ok).is_ok());
        let deep = format!(
            "{}s{}",
            "(".repeat(MAX_DEPTH + 1),
            ")".repeat(MAX_DEPTH + 1)
        );
        let e = Expr::parse(&deep).unwrap_err();
        assert_eq!(e.column, MAX_DEPTH + 1);
        assert!(e.message.contains("nested"));
        let e = Expr::parse(&"-".repeat(100_000)).unwrap_err();
        assert!(e.message.contains("nested"));
        // A long flat chain is not deep.
        let long = vec!["1"; 50_000].join("+");
        assert_eq!(eval0(&long).0, vec![50_000.0]);
    }

    #[test]
    fn pi_is_built_in_and_z_points_to_the_discrete_form() {
        // pi to double precision (closed form: std's constant).
        let (n, d) = eval0("2*pi*50");
        assert_eq!(n, vec![2.0 * std::f64::consts::PI * 50.0]);
        assert_eq!(d, vec![1.0]);
        assert!(Expr::parse("2*pi*s").unwrap().identifiers().is_empty());
        let e = Expr::parse("1/(z+1)").unwrap().eval(&|_| None).unwrap_err();
        assert_eq!(e.column, 4);
        assert!(e.message.contains("numerator_z"), "{}", e.message);
    }

    #[test]
    fn caret_line() {
        let e = ExprError::new(4, "x");
        assert_eq!(e.caret_line("a\tbcd"), " \t ^");
        assert_eq!(ExprError::new(6, "x").caret_line("2 +"), "     ^");
    }
}
