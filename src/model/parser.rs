//! Lexer and recursive-descent parser. The parser builds the expression
//! graph directly (there is no boxed syntax tree), resolving names as it
//! goes, and counts its recursion so that deep nesting is an error.

use super::catalogue::{self, FUNCTIONS};
use super::graph::{Graph, Id};
use super::ops::{Bin, Un};
use super::{ModelErrorKind, Symbols};

/// Deepest nesting of parentheses, function calls, unary signs and powers
/// (each counts one level); deeper formulas are a [`super::ModelErrorKind::TooDeep`] error.
pub const MAX_DEPTH: usize = 200;

/// An error with its 1-based character column.
pub(crate) type PErr = (ModelErrorKind, usize);

#[derive(Debug, Clone, PartialEq)]
enum Tok {
    Num(f64),
    Name(String),
    Plus,
    Minus,
    Star,
    Slash,
    Caret,
    LParen,
    RParen,
    LBrack,
    RBrack,
    Comma,
    End,
}

fn describe(t: &Tok) -> String {
    match t {
        Tok::Num(v) => format!("number {v}"),
        Tok::Name(n) => format!("name '{n}'"),
        Tok::Plus => "'+'".into(),
        Tok::Minus => "'-'".into(),
        Tok::Star => "'*'".into(),
        Tok::Slash => "'/'".into(),
        Tok::Caret => "'^'".into(),
        Tok::LParen => "'('".into(),
        Tok::RParen => "')'".into(),
        Tok::LBrack => "'['".into(),
        Tok::RBrack => "']'".into(),
        Tok::Comma => "','".into(),
        Tok::End => "the end of the formula".into(),
    }
}

fn syntax(msg: impl Into<String>, col: usize) -> PErr {
    (ModelErrorKind::Syntax(msg.into()), col)
}

/// Splits the formula into tokens with their 1-based columns.
fn lex(formula: &str) -> Result<Vec<(Tok, usize)>, PErr> {
    let chars: Vec<char> = formula.chars().collect();
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
            '/' => Some(Tok::Slash),
            '^' => Some(Tok::Caret),
            '(' => Some(Tok::LParen),
            ')' => Some(Tok::RParen),
            '[' => Some(Tok::LBrack),
            ']' => Some(Tok::RBrack),
            ',' => Some(Tok::Comma),
            _ => None,
        };
        if let Some(t) = single {
            out.push((t, col));
            i += 1;
            continue;
        }
        if c == '*' {
            if chars.get(i + 1) == Some(&'*') {
                out.push((Tok::Caret, col));
                i += 2;
            } else {
                out.push((Tok::Star, col));
                i += 1;
            }
            continue;
        }
        let digit_at = |k: usize| chars.get(k).is_some_and(|d| d.is_ascii_digit());
        if c.is_ascii_digit() || (c == '.' && digit_at(i + 1)) {
            let start = i;
            while digit_at(i) {
                i += 1;
            }
            if chars.get(i) == Some(&'.') {
                i += 1;
                while digit_at(i) {
                    i += 1;
                }
            }
            if matches!(chars.get(i), Some('e') | Some('E')) {
                let mut k = i + 1;
                if matches!(chars.get(k), Some('+') | Some('-')) {
                    k += 1;
                }
                if !digit_at(k) {
                    return Err(syntax(
                        "exponent of the number has no digits",
                        k.min(chars.len()) + 1,
                    ));
                }
                i = k;
                while digit_at(i) {
                    i += 1;
                }
            }
            let text: String = chars[start..i].iter().collect();
            let v: f64 = text
                .parse()
                .map_err(|_| syntax(format!("malformed number '{text}'"), col))?;
            if !v.is_finite() {
                return Err(syntax(format!("number '{text}' is too large"), col));
            }
            if chars
                .get(i)
                .is_some_and(|d| d.is_ascii_alphabetic() || *d == '_' || *d == '.')
            {
                return Err(syntax(
                    format!("unexpected '{}' right after the number '{text}'", chars[i]),
                    i + 1,
                ));
            }
            out.push((Tok::Num(v), col));
            continue;
        }
        if c.is_ascii_alphabetic() || c == '_' {
            let start = i;
            while chars
                .get(i)
                .is_some_and(|d| d.is_ascii_alphanumeric() || *d == '_')
            {
                i += 1;
            }
            out.push((Tok::Name(chars[start..i].iter().collect()), col));
            continue;
        }
        return Err(syntax(format!("unexpected character '{c}'"), col));
    }
    out.push((Tok::End, chars.len() + 1));
    Ok(out)
}

/// Levenshtein distance between two names (by characters).
pub(crate) fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    let mut cur = vec![0; b.len() + 1];
    for i in 1..=a.len() {
        cur[0] = i;
        for j in 1..=b.len() {
            let cost = usize::from(a[i - 1] != b[j - 1]);
            cur[j] = (prev[j] + 1).min(cur[j - 1] + 1).min(prev[j - 1] + cost);
        }
        std::mem::swap(&mut prev, &mut cur);
    }
    prev[b.len()]
}

/// The closest of `known` to `name`, if close enough to be a likely typo.
pub(crate) fn closest<'a>(name: &str, known: impl Iterator<Item = &'a str>) -> Option<String> {
    let mut best: Option<(usize, &str)> = None;
    for k in known {
        let d = if k.eq_ignore_ascii_case(name) {
            0
        } else {
            edit_distance(name, k)
        };
        let better = match best {
            None => true,
            Some((bd, _)) => d < bd,
        };
        if better {
            best = Some((d, k));
        }
    }
    let limit = (name.chars().count() / 3).max(2);
    best.filter(|&(d, _)| d <= limit).map(|(_, k)| k.to_string())
}

struct Parser<'s, 'g> {
    toks: Vec<(Tok, usize)>,
    pos: usize,
    depth: usize,
    syms: &'s Symbols<'s>,
    g: &'g mut Graph,
}

/// Parses `formula` into `g`, returning the root node.
pub(crate) fn parse(formula: &str, syms: &Symbols, g: &mut Graph) -> Result<Id, PErr> {
    let toks = lex(formula)?;
    if toks.len() == 1 {
        return Err(syntax("the formula is empty", 1));
    }
    let mut p = Parser {
        toks,
        pos: 0,
        depth: 0,
        syms,
        g,
    };
    let root = p.expr()?;
    let (t, col) = p.peek();
    match t {
        Tok::End => Ok(root),
        Tok::RParen | Tok::RBrack => Err(syntax(format!("unmatched {}", describe(&t)), col)),
        _ => Err(syntax(
            format!("expected an operator before {}", describe(&t)),
            col,
        )),
    }
}

impl Parser<'_, '_> {
    fn peek(&self) -> (Tok, usize) {
        self.toks[self.pos].clone()
    }

    fn bump(&mut self) -> (Tok, usize) {
        let t = self.toks[self.pos].clone();
        if self.pos + 1 < self.toks.len() {
            self.pos += 1;
        }
        t
    }

    /// expr := term (('+' | '-') term)*
    fn expr(&mut self) -> Result<Id, PErr> {
        let mut acc = self.term()?;
        loop {
            match self.peek().0 {
                Tok::Plus => {
                    self.bump();
                    let r = self.term()?;
                    acc = self.g.add(acc, r);
                }
                Tok::Minus => {
                    self.bump();
                    let r = self.term()?;
                    acc = self.g.sub(acc, r);
                }
                _ => return Ok(acc),
            }
        }
    }

    /// term := unary (('*' | '/') unary)*
    fn term(&mut self) -> Result<Id, PErr> {
        let mut acc = self.unary()?;
        loop {
            match self.peek().0 {
                Tok::Star => {
                    self.bump();
                    let r = self.unary()?;
                    acc = self.g.mul(acc, r);
                }
                Tok::Slash => {
                    self.bump();
                    let r = self.unary()?;
                    acc = self.g.div(acc, r);
                }
                _ => return Ok(acc),
            }
        }
    }

    /// unary := ('-' | '+') unary | power ; every nesting level passes here.
    fn unary(&mut self) -> Result<Id, PErr> {
        let (t, col) = self.peek();
        if self.depth > MAX_DEPTH {
            return Err((ModelErrorKind::TooDeep { limit: MAX_DEPTH }, col));
        }
        self.depth += 1;
        let r = match t {
            Tok::Minus => {
                self.bump();
                self.unary().map(|a| self.g.neg(a))
            }
            Tok::Plus => {
                self.bump();
                self.unary()
            }
            _ => self.power(),
        };
        self.depth -= 1;
        r
    }

    /// power := primary (('^' | '**') unary)? ; right-associative.
    fn power(&mut self) -> Result<Id, PErr> {
        let base = self.primary()?;
        if self.peek().0 == Tok::Caret {
            self.bump();
            let e = self.unary()?;
            return Ok(self.g.bin(Bin::Pow, base, e));
        }
        Ok(base)
    }

    fn close(open: &Tok) -> Tok {
        if *open == Tok::LBrack {
            Tok::RBrack
        } else {
            Tok::RParen
        }
    }

    fn expect_close(&mut self, open: &Tok, open_col: usize) -> Result<(), PErr> {
        let want = Self::close(open);
        let (t, col) = self.peek();
        if t == want {
            self.bump();
            return Ok(());
        }
        Err(syntax(
            format!(
                "expected {} to close the {} at column {open_col}, found {}",
                describe(&want),
                describe(open),
                describe(&t)
            ),
            col,
        ))
    }

    fn primary(&mut self) -> Result<Id, PErr> {
        let (t, col) = self.bump();
        match t {
            Tok::Num(v) => Ok(self.g.konst(v)),
            Tok::LParen | Tok::LBrack => {
                let inner = self.expr()?;
                self.expect_close(&t, col)?;
                Ok(inner)
            }
            Tok::Name(name) => {
                let next = self.peek().0;
                if next == Tok::LParen || next == Tok::LBrack {
                    self.call(&name, col)
                } else {
                    self.resolve(&name, col)
                }
            }
            other => Err(syntax(
                format!("expected a number, a name or '(' but found {}", describe(&other)),
                col,
            )),
        }
    }

    fn resolve(&mut self, name: &str, col: usize) -> Result<Id, PErr> {
        let s = self.syms;
        if let Some(j) = s.parameters.iter().position(|p| p == name) {
            return Ok(self.g.param(j));
        }
        if let Some((_, v)) = s.constants.iter().find(|(c, _)| c == name) {
            return Ok(self.g.konst(*v));
        }
        if let Some(k) = s.variables.iter().position(|v| v == name) {
            return Ok(self.g.var(k));
        }
        if let Some((_, v)) = catalogue::CONSTANTS.iter().find(|(c, _)| *c == name) {
            return Ok(self.g.konst(*v));
        }
        if catalogue::function(name).is_some() {
            return Err(syntax(
                format!("function '{name}' needs its arguments in parentheses, e.g. {name}(x)"),
                col,
            ));
        }
        let known = s
            .parameters
            .iter()
            .map(String::as_str)
            .chain(s.constants.iter().map(|(c, _)| c.as_str()))
            .chain(s.variables.iter().map(String::as_str))
            .chain(catalogue::CONSTANTS.iter().map(|(c, _)| *c));
        let suggestion = closest(name, known);
        Err((
            ModelErrorKind::UnknownName {
                name: name.to_string(),
                suggestion,
            },
            col,
        ))
    }

    fn call(&mut self, name: &str, col: usize) -> Result<Id, PErr> {
        let Some(info) = catalogue::function(name) else {
            let suggestion = closest(name, FUNCTIONS.iter().map(|f| f.name));
            return Err((
                ModelErrorKind::UnknownName {
                    name: name.to_string(),
                    suggestion,
                },
                col,
            ));
        };
        let (open, open_col) = self.bump();
        let mut args = Vec::new();
        if self.peek().0 != Self::close(&open) {
            loop {
                args.push(self.expr()?);
                if self.peek().0 == Tok::Comma {
                    self.bump();
                } else {
                    break;
                }
            }
        }
        self.expect_close(&open, open_col)?;
        if args.len() != info.arity {
            return Err((
                ModelErrorKind::Arity {
                    function: name.to_string(),
                    expected: info.arity,
                    found: args.len(),
                },
                col,
            ));
        }
        let g = &mut *self.g;
        let un = |op| Some(op);
        let op1 = match name {
            "exp" => un(Un::Exp),
            "ln" | "log" => un(Un::Ln),
            "log10" => un(Un::Log10),
            "sqrt" => un(Un::Sqrt),
            "abs" => un(Un::Abs),
            "sin" => un(Un::Sin),
            "cos" => un(Un::Cos),
            "tan" => un(Un::Tan),
            "asin" => un(Un::Asin),
            "acos" => un(Un::Acos),
            "atan" => un(Un::Atan),
            "sinh" => un(Un::Sinh),
            "cosh" => un(Un::Cosh),
            "tanh" => un(Un::Tanh),
            "erf" => un(Un::Erf),
            "erfc" => un(Un::Erfc),
            _ => None,
        };
        if let Some(op) = op1 {
            return Ok(g.un(op, args[0]));
        }
        let op2 = match name {
            "atan2" => Bin::Atan2,
            "min" => Bin::Min,
            "max" => Bin::Max,
            "pow" => Bin::Pow,
            _ => unreachable!("every catalogue function has an operation"),
        };
        Ok(g.bin(op2, args[0], args[1]))
    }
}
