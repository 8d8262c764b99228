//! The import graph of assay's own files has no cycles, read from the source text.
//!
//! Every file of `src/` is a node: the library's files are those reached from
//! `src/lib.rs` by `mod` declarations, the binary's those reached from `src/main.rs`
//! (a graph of its own, over its `crate::`; it reaches the library as `assay::`, which
//! is outside that graph). File A has an edge to file B when A names a `crate::`,
//! `super::` or `self::` path (or one through a child module of its own), in a `use`
//! or inline in its code, whose item is defined in B: the longest prefix of the path
//! that is a module gives a file, and a name that file imports (`pub use`, `pub(crate)
//! use`, a private `use` seen by its children, or a `use child::*` glob when the name is
//! not found otherwise) is followed to the file that defines it.
//!
//! Not read: comments (doc links such as [`crate::design`] are not imports), string
//! and char literals, and `#[cfg(test)]` items. Not edges: a module's `mod child;` and
//! its re-exports of its own descendants' items (`pub use child::Item`) that its own
//! code does not use, which are its outline, not its dependencies.
//!
//! A strongly connected component of more than one file is a cycle; the report lists
//! its edges, each with the statement or line that made it.

use std::collections::{BTreeMap, BTreeSet, VecDeque};
use std::path::Path;

// ---------------------------------------------------------------- reading the text

fn is_ident(c: u8) -> bool {
    c.is_ascii_alphanumeric() || c == b'_' || c >= 0x80
}

/// End (exclusive) of a raw string literal (`r"…"`, `r#"…"#`, `br"…"`) starting at `i`.
fn raw_string_end(b: &[u8], i: usize) -> Option<usize> {
    let mut j = i + usize::from(b[i] == b'b' || b[i] == b'c');
    if b.get(j) != Some(&b'r') {
        return None;
    }
    j += 1;
    let hashes = b[j..].iter().take_while(|&&c| c == b'#').count();
    j += hashes;
    if b.get(j) != Some(&b'"') {
        return None;
    }
    let close: Vec<u8> = std::iter::once(b'"')
        .chain(std::iter::repeat_n(b'#', hashes))
        .collect();
    b[j + 1..]
        .windows(close.len())
        .position(|w| w == close.as_slice())
        .map(|p| j + 1 + p + close.len())
}

/// `src` with comments and string and char literals blanked (newlines kept, so line
/// numbers stay).
fn blank_comments_and_literals(src: &str) -> String {
    let b = src.as_bytes();
    let mut out = b.to_vec();
    let blank = |out: &mut Vec<u8>, from: usize, to: usize| {
        for c in &mut out[from..to.min(b.len())] {
            if *c != b'\n' {
                *c = b' ';
            }
        }
    };
    let mut i = 0;
    while i < b.len() {
        let at_token_start = i == 0 || !is_ident(b[i - 1]);
        let next = b.get(i + 1).copied();
        let end = if b[i] == b'/' && next == Some(b'/') {
            Some(
                b[i..]
                    .iter()
                    .position(|&c| c == b'\n')
                    .map_or(b.len(), |p| i + p),
            )
        } else if b[i] == b'/' && next == Some(b'*') {
            let (mut j, mut depth) = (i + 2, 1);
            while j < b.len() && depth > 0 {
                match (b[j], b.get(j + 1)) {
                    (b'/', Some(b'*')) => (depth, j) = (depth + 1, j + 2),
                    (b'*', Some(b'/')) => (depth, j) = (depth - 1, j + 2),
                    _ => j += 1,
                }
            }
            Some(j)
        } else if let Some(e) = at_token_start.then(|| raw_string_end(b, i)).flatten() {
            Some(e)
        } else if b[i] == b'"' {
            let mut j = i + 1;
            while j < b.len() && b[j] != b'"' {
                j += if b[j] == b'\\' { 2 } else { 1 };
            }
            Some(j + 1)
        } else if b[i] == b'\'' {
            // A char literal ('x', '\n', '\'', '\u{e9}', 'é'); otherwise a lifetime.
            if next == Some(b'\\') {
                b.get(i + 3..)
                    .and_then(|r| r.iter().position(|&c| c == b'\''))
                    .map(|p| i + 3 + p + 1)
            } else {
                src[i + 1..]
                    .chars()
                    .next()
                    .map(|c| i + 1 + c.len_utf8())
                    .filter(|&j| b.get(j) == Some(&b'\''))
                    .map(|j| j + 1)
            }
        } else {
            None
        };
        match end {
            Some(e) => {
                blank(&mut out, i, e);
                i = e;
            }
            None => i += 1,
        }
    }
    String::from_utf8_lossy(&out).into_owned()
}

#[derive(Debug, Clone)]
struct Tok {
    text: String,
    line: usize,
}

/// Identifiers, `::` and single punctuation characters, with their line numbers.
fn tokens(code: &str) -> Vec<Tok> {
    let b = code.as_bytes();
    let (mut out, mut line, mut i) = (Vec::new(), 1, 0);
    while i < b.len() {
        let start = i;
        if b[i] == b'\n' {
            line += 1;
            i += 1;
            continue;
        } else if b[i].is_ascii_whitespace() {
            i += 1;
            continue;
        } else if is_ident(b[i]) {
            while i < b.len() && is_ident(b[i]) {
                i += 1;
            }
        } else if b[i] == b':' && b.get(i + 1) == Some(&b':') {
            i += 2;
        } else {
            i += 1;
        }
        out.push(Tok {
            text: code[start..i].to_string(),
            line,
        });
    }
    out
}

/// Index of the `}` matching the `{` at `open`.
fn matching_brace(t: &[Tok], open: usize) -> usize {
    let mut depth = 0;
    for (i, tok) in t.iter().enumerate().skip(open) {
        match tok.text.as_str() {
            "{" => depth += 1,
            "}" => {
                depth -= 1;
                if depth == 0 {
                    return i;
                }
            }
            _ => {}
        }
    }
    t.len() - 1
}

/// The tokens without `#[cfg(test)]` items (each cut from its attribute to the end of
/// the item: its matching `}` or its `;`).
fn without_test_items(t: Vec<Tok>) -> Vec<Tok> {
    const ATTR: [&str; 7] = ["#", "[", "cfg", "(", "test", ")", "]"];
    let mut out = Vec::new();
    let mut i = 0;
    while i < t.len() {
        let is_attr = ATTR
            .iter()
            .enumerate()
            .all(|(k, w)| t.get(i + k).is_some_and(|x| x.text == *w));
        if !is_attr {
            out.push(t[i].clone());
            i += 1;
            continue;
        }
        let (mut j, mut depth) = (i + ATTR.len(), 0i32);
        while j < t.len() {
            match t[j].text.as_str() {
                "(" | "[" => depth += 1,
                ")" | "]" => depth -= 1,
                ";" if depth == 0 => break,
                "{" if depth == 0 => {
                    j = matching_brace(&t, j);
                    break;
                }
                _ => {}
            }
            j += 1;
        }
        i = j + 1;
    }
    out
}

// ---------------------------------------------------------------- use statements

/// The paths of a use tree, each with the name it binds (`*` for a glob):
/// `a::{b::{C, D}, e as f, self}` gives `a::b::C` (C), `a::b::D` (D), `a::e` (f), `a` (a).
fn use_tree(t: &[Tok], i: &mut usize, prefix: &[String], out: &mut Vec<(Vec<String>, String)>) {
    let text = |i: usize| t.get(i).map_or("", |x| x.text.as_str());
    let mut segs = prefix.to_vec();
    loop {
        match text(*i) {
            "{" => {
                *i += 1;
                while !matches!(text(*i), "}" | "") {
                    use_tree(t, i, &segs, out);
                    if text(*i) == "," {
                        *i += 1;
                    }
                }
                *i += 1;
                return;
            }
            "*" => {
                *i += 1;
                segs.push("*".into());
                out.push((segs, "*".into()));
                return;
            }
            "::" => *i += 1,
            "" | ";" | "," | "}" => return,
            s => {
                segs.push(s.to_string());
                *i += 1;
                if text(*i) != "::" {
                    break;
                }
                *i += 1;
            }
        }
    }
    if segs.last().is_some_and(|s| s == "self") {
        segs.pop();
    }
    let mut bound = segs.last().cloned().unwrap_or_default();
    if text(*i) == "as" {
        bound = text(*i + 1).to_string();
        *i += 2;
    }
    out.push((segs, bound));
}

/// One `use` statement of a file.
#[derive(Debug)]
struct UseStmt {
    public: bool,
    /// Each path with the name it binds.
    paths: Vec<(Vec<String>, String)>,
    /// The statement as written (whitespace collapsed), with its first line.
    text: String,
    line: usize,
    /// Token range of the statement.
    range: std::ops::Range<usize>,
}

fn use_statements(t: &[Tok], lines: &[&str]) -> Vec<UseStmt> {
    let mut out = Vec::new();
    for i in 0..t.len() {
        if t[i].text != "use" || t.get(i + 1).is_some_and(|x| x.text == "<") {
            continue;
        }
        // `pub use` or `pub(crate) use` / `pub(super) use` / `pub(in path) use`
        let mut start = i;
        if i > 0 && t[i - 1].text == "pub" {
            start = i - 1;
        } else if i > 0 && t[i - 1].text == ")" {
            if let Some(open) = (0..i - 1).rev().find(|&k| t[k].text == "(") {
                if open > 0 && t[open - 1].text == "pub" {
                    start = open - 1;
                }
            }
        }
        let mut j = i + 1;
        let mut paths = Vec::new();
        use_tree(t, &mut j, &[], &mut paths);
        while j < t.len() && t[j].text != ";" {
            j += 1;
        }
        let (first, last) = (t[start].line, t[j.min(t.len() - 1)].line);
        let text = lines[first - 1..last.min(lines.len())]
            .join(" ")
            .split_whitespace()
            .collect::<Vec<_>>()
            .join(" ");
        out.push(UseStmt {
            public: start != i,
            paths,
            text,
            line: first,
            range: start..j + 1,
        });
    }
    out
}

// ---------------------------------------------------------------- the module tree

/// One file of the crate.
struct Module {
    /// `[]` for the crate root, `["surrogate", "model"]` for `src/surrogate/model.rs`.
    path: Vec<String>,
    file: String,
    source: String,
    toks: Vec<Tok>,
    children: BTreeSet<String>,
    uses: Vec<UseStmt>,
    /// Names this file binds by `use`, to the absolute paths they stand for.
    imports: BTreeMap<String, Vec<String>>,
    /// Modules this file imports with `use …::*`.
    globs: Vec<Vec<String>>,
    /// Names of items defined here.
    defines: BTreeSet<String>,
}

impl Module {
    /// The absolute path (segments after `crate::`) of `segs` as written in this file;
    /// `None` for a path outside the crate (another crate, std, a local name).
    fn absolute(&self, segs: &[String]) -> Option<Vec<String>> {
        let first = segs.first()?;
        let mut base = match first.as_str() {
            "crate" => return Some(segs[1..].to_vec()),
            "self" => return Some([self.path.as_slice(), &segs[1..]].concat()),
            "super" => self.path.clone(),
            c if self.children.contains(c) => return Some([self.path.as_slice(), segs].concat()),
            _ => return None,
        };
        let supers = segs.iter().take_while(|s| *s == "super").count();
        for _ in 0..supers {
            base.pop()?;
        }
        Some([base.as_slice(), &segs[supers..]].concat())
    }

    fn line(&self, n: usize) -> String {
        let text = self.source.lines().nth(n - 1).unwrap_or("").trim();
        format!("{}:{n}: {text}", self.file)
    }
}

/// Read `root` and every file it declares with `mod name;`, recursively. `read` gives
/// a file's text by its path relative to the crate (`src/x/y.rs`), `None` when absent.
fn module_tree(root: &str, read: &dyn Fn(&str) -> Option<String>) -> Vec<Module> {
    let mut out = Vec::new();
    let mut queue = VecDeque::from([(Vec::new(), root.to_string())]);
    while let Some((path, file)) = queue.pop_front() {
        let source = read(&file).unwrap_or_else(|| panic!("cannot read {file}"));
        let toks = without_test_items(tokens(&blank_comments_and_literals(&source)));
        let mut children = BTreeSet::new();
        let mut defines = BTreeSet::new();
        for w in toks.windows(3) {
            if w[0].text == "mod" && w[2].text == ";" {
                children.insert(w[1].text.clone());
            }
            let keyword = [
                "fn", "struct", "enum", "trait", "type", "const", "static", "union", "mod",
            ];
            if keyword.contains(&w[0].text.as_str())
                || (w[0].text == "macro_rules" && w[1].text == "!")
            {
                let name = if w[1].text == "!" { &w[2] } else { &w[1] };
                defines.insert(name.text.clone());
            }
        }
        let dir = match file.strip_suffix("/mod.rs") {
            Some(d) => d.to_string(),
            None if file == root => Path::new(root).parent().unwrap().display().to_string(),
            None => file.trim_end_matches(".rs").to_string(),
        };
        for c in &children {
            let candidates = [format!("{dir}/{c}.rs"), format!("{dir}/{c}/mod.rs")];
            let found = candidates
                .iter()
                .find(|f| read(f).is_some())
                .unwrap_or_else(|| {
                    panic!("{file} declares `mod {c};` but neither {candidates:?} exists")
                });
            queue.push_back((
                [path.as_slice(), std::slice::from_ref(c)].concat(),
                found.clone(),
            ));
        }
        let lines: Vec<&str> = source.lines().collect();
        let uses = use_statements(&toks, &lines);
        let mut m = Module {
            path,
            file,
            source: source.clone(),
            toks,
            children,
            uses,
            imports: BTreeMap::new(),
            globs: Vec::new(),
            defines,
        };
        for u in &m.uses {
            for (segs, bound) in &u.paths {
                let Some(abs) = m.absolute(segs) else {
                    continue;
                };
                if bound == "*" {
                    m.globs.push(abs[..abs.len() - 1].to_vec());
                } else {
                    m.imports.insert(bound.clone(), abs);
                }
            }
        }
        out.push(m);
    }
    out
}

// ---------------------------------------------------------------- the file graph

/// The files of one crate and the edges between them, each edge with the statements
/// or lines that made it.
struct Graph {
    modules: Vec<Module>,
    by_path: BTreeMap<Vec<String>, usize>,
    edges: BTreeMap<(usize, usize), BTreeSet<String>>,
}

impl Graph {
    fn new(root: &str, read: &dyn Fn(&str) -> Option<String>) -> Graph {
        let modules = module_tree(root, read);
        let by_path = modules
            .iter()
            .enumerate()
            .map(|(i, m)| (m.path.clone(), i))
            .collect();
        let mut g = Graph {
            modules,
            by_path,
            edges: BTreeMap::new(),
        };
        for a in 0..g.modules.len() {
            for (abs, why) in g.references(a) {
                let b = g.resolve(&abs, 0);
                if b != a {
                    g.edges.entry((a, b)).or_default().insert(why);
                }
            }
        }
        g
    }

    /// Every absolute path file `a` names, with the statement or line naming it.
    fn references(&self, a: usize) -> Vec<(Vec<String>, String)> {
        let m = &self.modules[a];
        let mut out = Vec::new();
        let mut in_use = vec![false; m.toks.len()];
        for u in &m.uses {
            in_use[u.range.clone()].fill(true);
        }
        let used_in_code: BTreeSet<&str> = (m.toks.iter().zip(&in_use))
            .filter(|(_, u)| !**u)
            .map(|(t, _)| t.text.as_str())
            .collect();
        for u in &m.uses {
            for (segs, bound) in &u.paths {
                let Some(abs) = m.absolute(segs) else {
                    continue;
                };
                // A module's re-exports of its own descendants' items are its outline,
                // unless its own code uses them too.
                let outline = u.public
                    && abs.len() > m.path.len() + 1
                    && abs.starts_with(&m.path)
                    && !used_in_code.contains(bound.as_str());
                if !outline {
                    out.push((abs, format!("{}:{}: {}", m.file, u.line, u.text)));
                }
            }
        }
        let t = &m.toks;
        for i in 0..t.len() {
            let head = t[i].text.as_str();
            let starts_path =
                matches!(head, "crate" | "super" | "self") || m.children.contains(head);
            let after = i.checked_sub(1).map_or("", |k| t[k].text.as_str());
            if in_use[i]
                || !starts_path
                || t.get(i + 1).is_none_or(|x| x.text != "::")
                || matches!(after, "::" | "$" | ".")
            {
                continue;
            }
            let mut segs = vec![head.to_string()];
            let mut j = i + 1;
            while t.get(j).is_some_and(|x| x.text == "::")
                && t.get(j + 1).is_some_and(|x| is_ident(x.text.as_bytes()[0]))
            {
                segs.push(t[j + 1].text.clone());
                j += 2;
            }
            if let Some(abs) = m.absolute(&segs) {
                out.push((abs, m.line(t[i].line)));
            }
        }
        out
    }

    /// Does module `m` define or import `name` (through its globs too)?
    fn knows(&self, m: usize, name: &str, hops: usize) -> bool {
        let md = &self.modules[m];
        md.defines.contains(name)
            || md.imports.contains_key(name)
            || (hops < 16
                && md.globs.iter().any(|g| {
                    self.by_path
                        .get(g)
                        .is_some_and(|&c| self.knows(c, name, hops + 1))
                }))
    }

    /// The file that defines the item at absolute path `abs`.
    fn resolve(&self, abs: &[String], hops: usize) -> usize {
        let k = (0..=abs.len())
            .rev()
            .find(|&k| self.by_path.contains_key(&abs[..k]))
            .expect("the crate root is a module");
        let m = self.by_path[&abs[..k]];
        if k == abs.len() || hops > 32 {
            return m;
        }
        let (name, rest) = (&abs[k], &abs[k + 1..]);
        let md = &self.modules[m];
        if let Some(target) = md.imports.get(name) {
            return self.resolve(&[target.as_slice(), rest].concat(), hops + 1);
        }
        if !md.defines.contains(name) {
            for g in &md.globs {
                if let Some(&c) = self.by_path.get(g) {
                    if self.knows(c, name, 0) {
                        return self.resolve(&[g.as_slice(), &abs[k..]].concat(), hops + 1);
                    }
                }
            }
        }
        m
    }

    fn adjacency(&self) -> Vec<Vec<usize>> {
        let mut adj = vec![Vec::new(); self.modules.len()];
        for &(a, b) in self.edges.keys() {
            adj[a].push(b);
        }
        adj
    }

    /// The strongly connected components of more than one file, each sorted by file.
    fn cycles(&self) -> Vec<Vec<usize>> {
        let mut out: Vec<Vec<usize>> = strongly_connected(&self.adjacency())
            .into_iter()
            .filter(|c| c.len() > 1)
            .map(|mut c| {
                c.sort_by(|&x, &y| self.modules[x].file.cmp(&self.modules[y].file));
                c
            })
            .collect();
        out.sort_by(|x, y| self.modules[x[0]].file.cmp(&self.modules[y[0]].file));
        out
    }

    /// Every cycle with one shortest loop through it and all its edges, each with the
    /// statements or lines that made it.
    fn cycle_report(&self) -> String {
        let mut s = String::new();
        let name = |i: usize| self.modules[i].file.as_str();
        for (n, c) in self.cycles().iter().enumerate() {
            let inside: BTreeSet<usize> = c.iter().copied().collect();
            let loop_: Vec<&str> = shortest_loop(&self.adjacency(), c[0], &inside)
                .into_iter()
                .map(name)
                .collect();
            s += &format!(
                "cycle {} ({} files): {}\n  e.g. {}\n",
                n + 1,
                c.len(),
                c.iter().map(|&i| name(i)).collect::<Vec<_>>().join(", "),
                loop_.join(" -> ")
            );
            for ((a, b), why) in &self.edges {
                if inside.contains(a) && inside.contains(b) {
                    s += &format!("  {} -> {}\n", name(*a), name(*b));
                    for w in why {
                        s += &format!("      {w}\n");
                    }
                }
            }
        }
        s
    }

    /// The graph of top-level modules (`(root)` for the crate root's file).
    fn collapsed(&self) -> String {
        let top = |i: usize| {
            self.modules[i]
                .path
                .first()
                .cloned()
                .unwrap_or_else(|| "(root)".into())
        };
        let mut out: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
        for i in 0..self.modules.len() {
            out.entry(top(i)).or_default();
        }
        for &(a, b) in self.edges.keys() {
            if top(a) != top(b) {
                out.entry(top(a)).or_default().insert(top(b));
            }
        }
        let names: Vec<&String> = out.keys().collect();
        let index = |n: &String| names.iter().position(|x| *x == n).unwrap();
        let adj: Vec<Vec<usize>> = out
            .values()
            .map(|v| v.iter().map(index).collect())
            .collect();
        let mut s = String::new();
        for (k, v) in &out {
            s += &format!(
                "  {k} -> {}\n",
                v.iter().cloned().collect::<Vec<_>>().join(", ")
            );
        }
        for c in strongly_connected(&adj).into_iter().filter(|c| c.len() > 1) {
            let mut c: Vec<&str> = c.iter().map(|&i| names[i].as_str()).collect();
            c.sort();
            s += &format!("  top-level cycle: {}\n", c.join(", "));
        }
        s
    }
}

/// Tarjan's strongly connected components of the graph `adj`.
fn strongly_connected(adj: &[Vec<usize>]) -> Vec<Vec<usize>> {
    struct State<'a> {
        adj: &'a [Vec<usize>],
        index: Vec<Option<usize>>,
        low: Vec<usize>,
        on_stack: Vec<bool>,
        stack: Vec<usize>,
        next: usize,
        out: Vec<Vec<usize>>,
    }
    fn visit(s: &mut State, v: usize) {
        s.index[v] = Some(s.next);
        s.low[v] = s.next;
        s.next += 1;
        s.stack.push(v);
        s.on_stack[v] = true;
        let adj = s.adj;
        for &w in &adj[v] {
            match s.index[w] {
                None => {
                    visit(s, w);
                    s.low[v] = s.low[v].min(s.low[w]);
                }
                Some(iw) if s.on_stack[w] => s.low[v] = s.low[v].min(iw),
                Some(_) => {}
            }
        }
        if s.index[v] == Some(s.low[v]) {
            let mut component = Vec::new();
            loop {
                let w = s.stack.pop().expect("v is on the stack");
                s.on_stack[w] = false;
                component.push(w);
                if w == v {
                    break;
                }
            }
            s.out.push(component);
        }
    }
    let n = adj.len();
    let mut s = State {
        adj,
        index: vec![None; n],
        low: vec![0; n],
        on_stack: vec![false; n],
        stack: Vec::new(),
        next: 0,
        out: Vec::new(),
    };
    for v in 0..n {
        if s.index[v].is_none() {
            visit(&mut s, v);
        }
    }
    s.out
}

/// A shortest loop from `start` back to it through the nodes `inside` (breadth first).
fn shortest_loop(adj: &[Vec<usize>], start: usize, inside: &BTreeSet<usize>) -> Vec<usize> {
    let mut from: BTreeMap<usize, usize> = BTreeMap::new();
    let mut queue = VecDeque::from([start]);
    while let Some(v) = queue.pop_front() {
        for &w in &adj[v] {
            if w == start {
                let mut path = vec![start, v];
                while *path.last().unwrap() != start {
                    path.push(from[path.last().unwrap()]);
                }
                path.reverse();
                return path;
            }
            if inside.contains(&w) && !from.contains_key(&w) {
                from.insert(w, v);
                queue.push_back(w);
            }
        }
    }
    vec![start]
}

// ---------------------------------------------------------------- this crate

fn crate_dir() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn read_from_disk(file: &str) -> Option<String> {
    std::fs::read_to_string(crate_dir().join(file)).ok()
}

fn rust_files_under(dir: &Path, out: &mut BTreeSet<String>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let p = entry.unwrap().path();
        if p.is_dir() {
            rust_files_under(&p, out);
        } else if p.extension().is_some_and(|e| e == "rs") {
            let rel = p.strip_prefix(crate_dir()).unwrap();
            out.insert(rel.display().to_string());
        }
    }
}

#[test]
fn every_source_file_is_in_the_library_or_the_binary_and_the_binary_has_no_cycle() {
    let lib = Graph::new("src/lib.rs", &read_from_disk);
    let bin = Graph::new("src/main.rs", &read_from_disk);
    let mut on_disk = BTreeSet::new();
    rust_files_under(&crate_dir().join("src"), &mut on_disk);
    let reached: BTreeSet<String> = lib
        .modules
        .iter()
        .chain(&bin.modules)
        .map(|m| m.file.clone())
        .collect();
    assert_eq!(
        on_disk, reached,
        "files of src/ that no `mod` declaration reaches, or declared files missing"
    );
    assert!(
        lib.edges.len() > lib.modules.len(),
        "too few edges: the reading is broken"
    );
    println!(
        "library: {} files, {} edges; top-level modules:\n{}",
        lib.modules.len(),
        lib.edges.len(),
        lib.collapsed()
    );
    println!(
        "library cycles (asserted by library_files_have_no_import_cycles):\n{}",
        lib.cycle_report()
    );
    println!(
        "binary: {} files, {} edges; modules:\n{}",
        bin.modules.len(),
        bin.edges.len(),
        bin.collapsed()
    );
    let report = bin.cycle_report();
    assert!(
        report.is_empty(),
        "import cycles among the binary's files:\n{report}"
    );
}

#[test]

fn library_files_have_no_import_cycles() {
    let lib = Graph::new("src/lib.rs", &read_from_disk);
    println!("top-level modules:\n{}", lib.collapsed());
    let report = lib.cycle_report();
    assert!(
        report.is_empty(),
        "import cycles among the library's files:\n{report}"
    );
}

// ---------------------------------------------------------------- the checker itself

fn in_memory(files: &[(&str, &str)]) -> Graph {
    let files: BTreeMap<String, String> = files
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    Graph::new("src/lib.rs", &|f: &str| files.get(f).cloned())
}

fn file_sets(g: &Graph) -> Vec<Vec<&str>> {
    g.cycles()
        .iter()
        .map(|c| c.iter().map(|&i| g.modules[i].file.as_str()).collect())
        .collect()
}

#[test]
fn a_cycle_through_a_re_export_is_found_with_the_lines_that_make_it() {
    let g = in_memory(&[
        ("src/lib.rs", "pub mod a;\npub mod b;\nmod c;\n"),
        (
            "src/a/mod.rs",
            "//! Outline.\nmod inner;\npub use inner::Thing;\n",
        ),
        (
            "src/a/inner.rs",
            "pub struct Thing;\n\nimpl Thing {\n    pub fn go() -> u32 {\n        crate::b::helper()\n    }\n}\n",
        ),
        (
            "src/b.rs",
            "use crate::{a::{Thing, self}, c::Other};\n\npub fn helper() -> u32 {\n    let _ = Thing;\n    1\n}\n",
        ),
        ("src/c.rs", "pub struct Other;\n"),
    ]);
    assert_eq!(file_sets(&g), vec![vec!["src/a/inner.rs", "src/b.rs"]]);
    let report = g.cycle_report();
    assert!(
        report.contains("src/b.rs -> src/a/inner.rs\n      src/b.rs:1: use crate::{a::{Thing, self}, c::Other};"),
        "{report}"
    );
    assert!(
        report.contains("src/a/inner.rs -> src/b.rs\n      src/a/inner.rs:5: crate::b::helper()"),
        "{report}"
    );
    // `a` itself (importing `self`) and `c` are reached but not in the cycle.
    let b = g.by_path[&vec!["b".to_string()]];
    let targets: BTreeSet<&str> = g
        .edges
        .keys()
        .filter(|(x, _)| *x == b)
        .map(|&(_, y)| g.modules[y].file.as_str())
        .collect();
    assert_eq!(
        targets,
        BTreeSet::from(["src/a/inner.rs", "src/a/mod.rs", "src/c.rs"])
    );
}

#[test]
fn a_glob_re_export_is_followed_to_the_child_that_defines_the_name() {
    let g = in_memory(&[
        ("src/lib.rs", "mod a;\nmod b;\n"),
        (
            "src/a/mod.rs",
            "mod inner;\npub use inner::*;\npub fn own() {}\n",
        ),
        ("src/a/inner.rs", "pub fn deep() { super::super::b::f() }\n"),
        (
            "src/b.rs",
            "pub fn f() { crate::a::deep(); crate::a::own(); }\n",
        ),
    ]);
    assert_eq!(file_sets(&g), vec![vec!["src/a/inner.rs", "src/b.rs"]]);
    let b = g.by_path[&vec!["b".to_string()]];
    let a = g.by_path[&vec!["a".to_string()]];
    assert!(
        g.edges.contains_key(&(b, a)),
        "crate::a::own is defined in a/mod.rs"
    );
}

#[test]
fn a_re_export_is_an_edge_only_when_the_module_uses_it_itself() {
    let outline_only = in_memory(&[
        ("src/lib.rs", "mod a;\n"),
        (
            "src/a/mod.rs",
            "mod inner;\npub use inner::Thing;\npub const LIMIT: u32 = 3;\n",
        ),
        (
            "src/a/inner.rs",
            "pub struct Thing(u32);\npub fn make() -> Thing { Thing(super::LIMIT) }\n",
        ),
    ]);
    assert!(
        outline_only.cycles().is_empty(),
        "{}",
        outline_only.cycle_report()
    );
    let used = in_memory(&[
        ("src/lib.rs", "mod a;\n"),
        (
            "src/a/mod.rs",
            "mod inner;\npub use inner::Thing;\npub const LIMIT: u32 = 3;\npub fn twice(t: &Thing) -> u32 { 2 * t.0 }\n",
        ),
        (
            "src/a/inner.rs",
            "pub struct Thing(pub u32);\npub fn make() -> Thing { Thing(super::LIMIT) }\n",
        ),
    ]);
    assert_eq!(
        file_sets(&used),
        vec![vec!["src/a/inner.rs", "src/a/mod.rs"]]
    );
    assert!(
        used.cycle_report().contains(
            "src/a/mod.rs -> src/a/inner.rs\n      src/a/mod.rs:2: pub use inner::Thing;"
        ),
        "{}",
        used.cycle_report()
    );
}

#[test]
fn comments_literals_and_test_items_make_no_edges() {
    let g = in_memory(&[
        ("src/lib.rs", "pub mod a;\npub mod b;\n"),
        (
            "src/a.rs",
            "//! See [`crate::b::helper`].\n\
             use crate::b::helper;\n\
             pub fn one() -> u32 { helper() }\n",
        ),
        (
            "src/b.rs",
            "/// Not [`crate::a::one`] /* nor crate::a::one */.\n\
             pub fn helper() -> u32 {\n    let s = \"crate::a::one()\";\n    let r = r#\"use crate::a;\"#;\n    let c = '{';\n    s.len() as u32 + r.len() as u32 + c as u32\n}\n\
             #[cfg(test)]\n\
             pub(crate) fn only_in_tests() -> u32 { crate::a::one() }\n\
             pub fn after<'a>(x: &'a str) -> &'a str { x }\n\
             #[cfg(test)]\n\
             mod tests {\n    use crate::a::one;\n    #[test]\n    fn t() { assert_eq!(one(), 1); }\n}\n",
        ),
    ]);
    assert!(g.cycles().is_empty(), "{}", g.cycle_report());
    assert_eq!(g.edges.len(), 1, "only a -> b");
    // The items after a test item are still read.
    let b = &g.modules[g.by_path[&vec!["b".to_string()]]];
    assert!(b.defines.contains("after") && !b.defines.contains("only_in_tests"));
}

#[test]
fn nested_use_trees_expand_to_every_path() {
    let t = tokens("use crate::a::{b::{C, D}, e as f, self, g::*};");
    let mut i = 1;
    let mut out = Vec::new();
    use_tree(&t, &mut i, &[], &mut out);
    let got: Vec<(String, &str)> = out
        .iter()
        .map(|(p, n)| (p.join("::"), n.as_str()))
        .collect();
    assert_eq!(
        got,
        vec![
            ("crate::a::b::C".to_string(), "C"),
            ("crate::a::b::D".to_string(), "D"),
            ("crate::a::e".to_string(), "f"),
            ("crate::a".to_string(), "a"),
            ("crate::a::g::*".to_string(), "*"),
        ]
    );
}
