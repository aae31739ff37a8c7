//! The words of every statement header, as data.
//!
//! A [`Form`] lists the places of one header in order: fixed words (`from`,
//! `using`, `checked against`), choices among fixed words (`total|direct`)
//! and values the user writes (names, numbers, a quoted file). After the
//! fixed places a header may carry options, each a short form of its own
//! (`seed S`, `given A, B`), and the sampler options `with laplace …|with
//! nuts …`.
//!
//! The statements read their headers through [`Form::read`], and the
//! kernel's completion asks [`next_words`] what may follow the words typed
//! so far: both read the same tables, so a word added to a statement is
//! offered at the cursor without a second list to keep in step.

/// One place in a header.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Slot {
    /// A fixed word.
    Word(&'static str),
    /// One of a few fixed words; the word written is kept.
    Choice(&'static [&'static str]),
    /// A word the user chooses (a name, a level, a number); kept.
    Value,
    /// A name of one kind (a table, a column of the header's table …);
    /// kept. Read like [`Slot::Value`]; completion offers only such names.
    Name(Names),
    /// The rest of the header as written (a quoted file path); kept. Last.
    Quoted,
}

/// The kind of name a [`Slot::Name`] place takes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Names {
    /// Any name, level or number (every name of the session fits).
    Any,
    /// A name the statement gives (nothing to offer).
    New,
    Table,
    Graph,
    /// A model (or joint model) of the session.
    Model,
    /// A column of the table or model named earlier in the header.
    Column,
    /// A node of the graph named in the header.
    Node,
    /// A level of the column or node named just before (in a `b vs a`
    /// pair, the last column or node named).
    Level,
    /// A parameter label of the model a `model` block declares (`prior for
    /// …`), known once that model has been built in the session; a label
    /// holds spaces and brackets, so the kernel offers the rest of each
    /// label after the part already typed.
    Parameter,
}

/// A kind of name wanted at the cursor, with the names typed earlier in
/// the header that it belongs to: for a column, the table or model; for a
/// node, the graph; for a level, the column or node first, then the table
/// or model.
#[derive(Debug, Clone, PartialEq)]
pub struct Wanted {
    pub names: Names,
    pub of: Vec<String>,
}

impl Slot {
    fn accepts(&self, word: &str) -> bool {
        match self {
            Slot::Word(w) => *w == word,
            Slot::Choice(ws) => ws.contains(&word),
            Slot::Value | Slot::Name(_) | Slot::Quoted => true,
        }
    }

    /// Whether the place takes a word the user chooses.
    fn is_value(&self) -> bool {
        matches!(self, Slot::Value | Slot::Name(_))
    }

    fn kept(&self) -> bool {
        !matches!(self, Slot::Word(_))
    }

    /// The fixed words this place allows (none for a value).
    fn words(&self) -> Vec<&'static str> {
        match self {
            Slot::Word(w) => vec![*w],
            Slot::Choice(ws) => ws.to_vec(),
            Slot::Value | Slot::Name(_) | Slot::Quoted => Vec::new(),
        }
    }
}

use Slot::{Choice, Name, Quoted, Value, Word};
use Names::{Column as Col, Graph as Gr, Level as Lv, Model as Md, New, Node as Nd, Table as Tb};
use crate::infer::nuts::MASS_WORDS;

/// The grammar of one statement header.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Form {
    /// The places every header of this form has, in order.
    pub slots: &'static [Slot],
    /// Options that may follow, each starting with a fixed word.
    pub options: &'static [&'static [Slot]],
    /// Whether `with laplace …|with nuts …` may end the header.
    pub method: bool,
    /// The form as error messages show it.
    pub usage: &'static str,
}

/// A header read by its form: the words kept (choices, values, the quoted
/// rest) in order, and the text after the fixed places (options).
#[derive(Debug, Clone, PartialEq)]
pub struct Reading<'s> {
    pub kept: Vec<&'s str>,
    pub rest: &'s str,
}

/// Where a header left its form: the index of the first place it did not
/// fill (`slots.len()` when words are left over that no option may take).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Mismatch {
    pub slot: usize,
}

impl Form {
    /// Read `head` (a header without its closing `:`) against the form.
    pub fn read<'s>(&self, head: &'s str) -> Result<Reading<'s>, Mismatch> {
        let tokens = tokens(head);
        let mut kept = Vec::new();
        for (i, slot) in self.slots.iter().enumerate() {
            let &(at, word) = tokens.get(i).ok_or(Mismatch { slot: i })?;
            if *slot == Quoted {
                kept.push(head[at..].trim());
                return Ok(Reading { kept, rest: "" });
            }
            if !slot.accepts(word) {
                return Err(Mismatch { slot: i });
            }
            if slot.kept() {
                kept.push(word);
            }
        }
        let rest = tokens.get(self.slots.len()).map_or("", |&(at, _)| head[at..].trim());
        if !rest.is_empty() && self.options.is_empty() && !self.method {
            return Err(Mismatch { slot: self.slots.len() });
        }
        Ok(Reading { kept, rest })
    }

    /// [`Form::read`] with the kept words as an array of `N` (the number
    /// of kept places of the form).
    pub fn read_n<'s, const N: usize>(&self, head: &'s str) -> Result<([&'s str; N], &'s str), Mismatch> {
        let reading = self.read(head)?;
        let kept = reading.kept.try_into().map_err(|_| Mismatch { slot: self.slots.len() })?;
        Ok((kept, reading.rest))
    }

    /// The first word of each option.
    pub fn option_words(&self) -> Vec<&'static str> {
        self.options.iter().flat_map(|o| o.first().map(Slot::words).unwrap_or_default()).collect()
    }
}

/// The words of a header with their byte offsets: white space and commas
/// separate words, `:` is a word of its own, and a double-quoted text is
/// one word.
pub(crate) fn tokens(head: &str) -> Vec<(usize, &str)> {
    let mut out = Vec::new();
    let mut start: Option<usize> = None;
    let mut quoted = false;
    for (i, c) in head.char_indices() {
        if quoted {
            if c == '"' {
                quoted = false;
            }
            continue;
        }
        let separator = c.is_whitespace() || c == ',' || c == ':';
        if separator {
            if let Some(s) = start.take() {
                out.push((s, &head[s..i]));
            }
            if c == ':' {
                out.push((i, &head[i..i + 1]));
            }
        } else {
            if start.is_none() {
                start = Some(i);
            }
            quoted = c == '"';
        }
    }
    if let Some(s) = start {
        out.push((s, &head[s..]));
    }
    out
}

const EFFECT_KINDS: &[&str] = &["total", "direct"];
/// The figures of `plot NAME KIND`, named by what they let a scientist see:
/// the parameters' `estimates`, whether the chains `mixing` agree, the
/// fitted `lines` over the data, the `spline` curve with its weights, and
/// outcome sets simulated from the `prior` or compared in a `check`, and how
/// far partial pooling pulled each level of a pooled group (`shrinkage`),
/// and an ordered category's effect level by level (`steps`).
pub const PLOT_KINDS: &[&str] = &["estimates", "mixing", "lines", "spline", "prior", "check", "shrinkage", "steps"];
/// Figure words of earlier versions, each with the word that replaced it;
/// `plot` refuses them with an error naming the new word.
pub const RETIRED_PLOT_KINDS: &[(&str, &str)] =
    &[("posterior", "estimates"), ("trace", "mixing"), ("rank", "mixing"), ("basis", "spline")];
/// The sampling methods after `with`.
pub const METHODS: &[&str] = &["laplace", "nuts"];
/// The options of `with laplace`, each followed by its value.
pub const LAPLACE_OPTIONS: &[&str] = &["draws", "seed"];
/// The options of `with nuts`, each followed by its value.
pub const NUTS_OPTIONS: &[&str] = &["chains", "settle", "draws", "acceptance", "doublings", "mass", "seed"];
/// Sampler option words of earlier versions of Waypath, each with the word
/// that replaced it: a notebook that still writes one gets an error naming
/// the new word rather than a silent change of meaning.
pub const RETIRED_NUTS_OPTIONS: &[(&str, &str)] = &[("warmup", "settle"), ("accept", "acceptance"), ("depth", "doublings")];

const SEED: &[Slot] = &[Word("seed"), Value];
/// The word of the interval option (`intervals 80%`) and of the session
/// statement that sets it for every later statement.
pub const INTERVALS_WORD: &str = "intervals";
const INTERVALS_OPTION: &[Slot] = &[Word(INTERVALS_WORD), Value];
/// `intervals P%`: the interval mass of every later statement.
pub const INTERVALS: Form = Form {
    slots: &[Word(INTERVALS_WORD), Value],
    options: &[],
    method: false,
    usage: "intervals P%  (the mass of every later interval, e.g. intervals 80% or intervals 0.8; 90% until set)",
};

pub const TABLE: Form = Form {
    slots: &[Word("table"), Name(New), Word("from"), Quoted],
    options: &[],
    method: false,
    usage: "table NAME from \"FILE.csv\"  (end with ':' to declare columns, `drop missing`, `keep where …` below)",
};
const GRAPH_USAGE: &str = "graph NAME:  (with edges such as `a -> b -> c` below)  or  graph NAME from \"FILE.dot\"";
pub const GRAPH: Form = Form { slots: &[Word("graph"), Name(New)], options: &[], method: false, usage: GRAPH_USAGE };
pub const GRAPH_FILE: Form =
    Form { slots: &[Word("graph"), Name(New), Word("from"), Quoted], options: &[], method: false, usage: GRAPH_USAGE };
const ASK_SLOTS: [Slot; 9] =
    [Word("ask"), Choice(EFFECT_KINDS), Word("effect"), Word("of"), Name(Nd), Word("on"), Name(Nd), Word("in"), Name(Gr)];
pub const ASK: Form = Form {
    slots: &ASK_SLOTS,
    options: &[],
    method: false,
    usage: "ask total effect of X on Y in GRAPH  (or: ask direct effect of X on Y in GRAPH)",
};
pub const ASK_USING: Form = Form {
    slots: &[
        Word("ask"), Choice(EFFECT_KINDS), Word("effect"), Word("of"), Name(Nd), Word("on"), Name(Nd), Word("in"), Name(Gr),
        Word("using"), Name(Tb),
    ],
    options: &[
        &[Word("checking"), Word("zero")],
        &[Word("at"), Name(Nd), Name(Lv)],
        &[Word("pooling"), Name(Col)],
        &[Word("varying"), Word("by"), Name(Nd)],
        INTERVALS_OPTION,
    ],
    method: true,
    usage: "ask total|direct effect of X on Y in GRAPH using TABLE [checking zero] [at NODE VALUE …] [pooling COLUMN …] [varying by CATEGORY] [intervals P%] [with nuts …|with laplace …]",
};
pub const PATHS: Form = Form {
    slots: &[Word("paths"), Word("from"), Name(Nd), Word("to"), Name(Nd), Word("in"), Name(Gr)],
    options: &[&[Word("given"), Name(Nd)]],
    method: false,
    usage: "paths from X to Y in GRAPH [given A, B]",
};
pub const IMPLICATIONS: Form =
    Form { slots: &[Word("implications"), Word("of"), Name(Gr)], options: &[], method: false, usage: "implications of GRAPH" };
pub const IMPLICATIONS_CHECKED: Form = Form {
    slots: &[Word("implications"), Word("of"), Name(Gr), Word("checked"), Word("against"), Name(Tb)],
    options: &[INTERVALS_OPTION],
    method: true,
    usage: "implications of GRAPH checked against TABLE [intervals P%] [with laplace …|with nuts …]",
};
pub const MODEL: Form = Form {
    slots: &[Word("model"), Name(New)],
    options: &[],
    method: false,
    usage: "model NAME:  (then indented: `Y from TERMS using TABLE`, optional `family …`, `prior GROUP: dist(…)`)",
};
pub const FIT: Form = Form {
    slots: &[Word("fit"), Name(Md)],
    options: &[INTERVALS_OPTION],
    method: true,
    usage: "fit NAME [intervals P%] [with laplace [draws N] [seed N] | with nuts [chains N] [settle N] [draws N] [acceptance P] [doublings N] [mass diagonal|low-rank] [seed N]]",
};
pub const SHOW: Form =
    Form { slots: &[Word("show"), Value], options: &[INTERVALS_OPTION], method: false, usage: "show NAME [intervals P%]" };
pub const EXPORT: Form = Form {
    slots: &[Word("export"), Name(Md), Word("draws"), Word("to"), Quoted],
    options: &[],
    method: false,
    usage: "export NAME draws to \"FILE.csv\"",
};
pub const PLOT: Form = Form {
    slots: &[Word("plot"), Name(Md), Choice(PLOT_KINDS)],
    options: &[&[Word("of"), Value], &[Word("over"), Name(Col)], INTERVALS_OPTION],
    method: false,
    usage: "plot NAME estimates|mixing [of PARAMETER, …]  or  plot NAME lines [over X] [intervals P%]  or  plot NAME spline [intervals P%]  or  plot NAME prior|check  or  plot NAME shrinkage [of GROUP]  or  plot NAME steps [of COLUMN] [intervals P%]",
};
pub const SAVE: Form = Form {
    slots: &[Word("save"), Word("figure"), Word("to"), Quoted],
    options: &[],
    method: false,
    usage: "save figure to \"FILE.svg\"",
};
/// `on SCALE`: a scale alone, or one that takes a value (`events by T`,
/// `quantile Q`); three options opening with the same word, told apart by
/// the word after it.
const CONTRAST_OPTIONS: &[&[Slot]] = &[
    &[Word("on"), Choice(crate::query::contrast::PLAIN_SCALES)],
    &[Word("on"), Word(crate::query::contrast::EVENTS_BY), Word("by"), Value],
    &[Word("on"), Word(crate::query::contrast::QUANTILE), Value],
    SEED,
    &[Word("at"), Name(Col), Name(Lv)],
    &[Word("along"), Name(Col), Word("from"), Value, Word("to"), Value],
    &[Word("by"), Value],
    &[Word("over"), Word("rows")],
    INTERVALS_OPTION,
];
const CONTRAST_USAGE: &str =
    "contrast MODEL: X b vs a [on outcomes|scores|log-times|medians|events by T|quantile Q] [seed S] [at Z v, …] [along W from LO to HI [by STEP]] [over rows] [intervals P%]";
/// `contrast MODEL: X [options]` (one step of X).
pub const CONTRAST: Form = Form {
    slots: &[Word("contrast"), Name(Md), Word(":"), Name(Col)],
    options: CONTRAST_OPTIONS,
    method: false,
    usage: CONTRAST_USAGE,
};
/// `contrast MODEL: X b vs a [options]` (two settings of X).
pub const CONTRAST_BETWEEN: Form = Form {
    slots: &[Word("contrast"), Name(Md), Word(":"), Name(Col), Name(Lv), Word("vs"), Name(Lv)],
    options: CONTRAST_OPTIONS,
    method: false,
    usage: CONTRAST_USAGE,
};
pub const COMPARE_ROUTES: Form = Form {
    slots: &[
        Word("compare"), Word("routes"), Word("for"), Choice(EFFECT_KINDS), Word("effect"), Word("of"), Name(Nd), Word("on"), Name(Nd),
        Word("in"), Name(Gr), Word("using"), Name(Tb),
    ],
    options: &[&[Word("setting"), Name(Lv), Word("vs"), Name(Lv)], INTERVALS_OPTION],
    method: true,
    usage: "compare routes for total|direct effect of X on Y in GRAPH using TABLE [setting v1 vs v0] [intervals P%] [with nuts …|with laplace …]",
};
pub const JOINT: Form = Form {
    slots: &[Word("joint"), Name(New), Word("="), Name(Gr), Word("using"), Name(Tb)],
    options: &[],
    method: false,
    usage: "joint NAME = GRAPH using TABLE  (end with ':' to override a node below, e.g. `girth from rootstock`)",
};
/// The words that open the refit option of `robustness`.
pub const REFIT_WORDS: &[&str] = &["refit", "with", "hidden", "to"];
/// The words that open the refit's exposure-model priors, stated in the
/// exposure's own unit.
pub const EXPOSURE_PRIORS_WORDS: &str = "exposure priors";
/// `robustness of MODEL: X` — the contrast under an assumed hidden common
/// cause; with `refit with hidden to X PRIOR and to Y PRIOR`, the model
/// refitted beside a simulated hidden node whose strengths take those
/// priors (and X's own model the `exposure priors`, in X's unit, if stated).
pub const ROBUSTNESS: Form = Form {
    slots: &[Word("robustness"), Word("of"), Name(Md), Word(":"), Name(Col)],
    options: &[INTERVALS_OPTION, &[Word("refit"), Word("with"), Word("hidden"), Word("to"), Value]],
    method: true,
    usage: "robustness of MODEL: X [refit with hidden to X PRIOR and to Y PRIOR [exposure priors intercepts PRIOR, slopes PRIOR, spread PRIOR] [with nuts …]] [intervals P%]",
};
pub const INTERVENE: Form = Form {
    slots: &[Word("intervene"), Name(Md), Word(":"), Word("set"), Name(Col), Name(Lv), Word("vs"), Name(Lv), Word("watch")],
    options: &[&[Word("rows"), Value], SEED, &[Word("in"), Value, Value], INTERVALS_OPTION],
    method: false,
    usage: "intervene NAME: set X v1 vs v0, watch Y[, Z] [rows N] [seed S] [in new C | in C LEVEL] [intervals P%]",
};
pub const SIMULATE: Form = Form {
    slots: &[Word("simulate"), Name(New), Word("from"), Name(Gr), Word("rows"), Value, Word("seed"), Value],
    options: &[],
    method: false,
    usage: "simulate NAME from GRAPH rows N seed S:  (then one mechanism per node, e.g. `girth = normal(28, 4)`)",
};
pub const RECOVER: Form = Form {
    slots: &[Word("recover"), Name(Md), Word("on"), Value],
    options: &[INTERVALS_OPTION],
    method: true,
    usage: "recover MODEL on SIMULATION [intervals P%] [with laplace …|with nuts …]",
};
pub const CALIBRATE: Form = Form {
    slots: &[Word("calibrate"), Name(Md), Word("reps"), Value],
    options: &[SEED],
    method: true,
    usage: "calibrate MODEL reps R [seed S] [with laplace …|with nuts …]",
};
const CHECK_USAGE: &str = "prior check MODEL [sets N] [seed S]  or  check MODEL [sets N] [seed S]";
const CHECK_OPTIONS: &[&[Slot]] = &[&[Word("sets"), Value], SEED];
pub const PRIOR_CHECK: Form =
    Form { slots: &[Word("prior"), Word("check"), Name(Md)], options: CHECK_OPTIONS, method: false, usage: CHECK_USAGE };
pub const CHECK: Form = Form { slots: &[Word("check"), Name(Md)], options: CHECK_OPTIONS, method: false, usage: CHECK_USAGE };

/// The option of `score predictions of …` that bounds the exact refits.
pub const REFITS_WORD: &str = "refits";
/// `score predictions of M1, M2, … [refits N]`: fitted models of one
/// outcome scored by their predictions of left-out rows.
pub const SCORE: Form = Form {
    slots: &[Word("score"), Word("predictions"), Word("of")],
    options: &[&[Word(REFITS_WORD), Value]],
    method: false,
    usage: "score predictions of MODEL[, MODEL …] [refits N]  (fitted models of one outcome on the same rows; N rows at most refitted exactly per model, 5 unless set)",
};

/// Every header form, in the order statement words are listed to users.
pub const FORMS: &[Form] = &[
    TABLE, GRAPH, GRAPH_FILE, ASK, ASK_USING, PATHS, IMPLICATIONS, IMPLICATIONS_CHECKED, MODEL, FIT, SHOW, EXPORT, PLOT,
    SAVE, CONTRAST, CONTRAST_BETWEEN, COMPARE_ROUTES, ROBUSTNESS, SCORE, JOINT, INTERVENE, SIMULATE, RECOVER, CALIBRATE, PRIOR_CHECK,
    CHECK, INTERVALS,
];

/// The words that start a statement, in [`FORMS`] order.
pub fn statement_words() -> Vec<&'static str> {
    let mut words: Vec<&'static str> = Vec::new();
    for form in FORMS {
        if let Some(Word(w)) = form.slots.first() {
            if !words.contains(w) {
                words.push(w);
            }
        }
    }
    words
}

/// What may come next in a header or a body line: fixed words and
/// symbols (`:`, `,`, `->`, `<=` …), calls (words written with an opening
/// bracket, such as `normal(`), whether a value (a name, a column, a level)
/// fits there, and which kinds of name do (none listed: any name).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Next {
    pub words: Vec<&'static str>,
    pub calls: Vec<&'static str>,
    pub values: bool,
    pub names: Vec<Wanted>,
}

impl Next {
    pub(crate) fn add(&mut self, words: &[&'static str]) {
        for w in words {
            if !self.words.contains(w) {
                self.words.push(w);
            }
        }
    }

    /// The place `slot`, after the words `filled` typed in the places
    /// before it.
    fn slot(&mut self, slot: &Slot, filled: &[(Slot, &str)]) {
        match slot {
            Value | Quoted => self.want(Wanted { names: Names::Any, of: Vec::new() }),
            Name(names) => self.want(wanted(*names, filled)),
            other => self.add(&other.words()),
        }
    }

    fn want(&mut self, wanted: Wanted) {
        self.values = true;
        if !self.names.contains(&wanted) {
            self.names.push(wanted);
        }
    }
}

/// The names a place of kind `names` takes, given the words typed in the
/// places before it (see [`Wanted`]).
fn wanted(names: Names, filled: &[(Slot, &str)]) -> Wanted {
    let typed_in = |kinds: &[Names]| -> Vec<String> {
        filled.iter().filter(|(s, _)| matches!(s, Name(n) if kinds.contains(n))).map(|(_, w)| w.to_string()).collect()
    };
    let of = match names {
        Col => typed_in(&[Tb, Md]),
        Nd => typed_in(&[Gr]),
        Lv => {
            // the column or node just named, else the first one named (`x b vs a`)
            let named = match filled.last() {
                Some((Name(Col | Nd), w)) => Some(w.to_string()),
                _ => typed_in(&[Col, Nd]).into_iter().next(),
            };
            named.into_iter().chain(typed_in(&[Tb, Md])).collect()
        }
        _ => Vec::new(),
    };
    Wanted { names, of }
}

/// What may follow `typed`, the complete words of a header before the
/// cursor, by every form whose places those words fill.
pub fn next_words(typed: &str) -> Next {
    let words: Vec<&str> = tokens(typed).into_iter().map(|(_, w)| w).collect();
    let after_comma = typed.trim_end().ends_with(',');
    let mut next = Next::default();
    for form in FORMS {
        let fixed = form.slots.len().min(words.len());
        // a value place is not taken by a word that starts an option of the form
        let fits = |slot: &Slot, w: &&str| slot.accepts(w) && !(slot.is_value() && is_option_word(form, w));
        if !form.slots.iter().zip(&words).all(|(slot, w)| fits(slot, w)) {
            continue;
        }
        if form.slots[..fixed].contains(&Quoted) {
            continue;
        }
        let filled: Vec<(Slot, &str)> = form.slots.iter().copied().zip(words.iter().copied()).collect();
        match form.slots.get(words.len()) {
            Some(slot) => next.slot(slot, &filled),
            None => after_fixed(form, &filled, &words[fixed..], after_comma, &mut next),
        }
    }
    next
}

/// What may come once the fixed places of `form` are filled (`filled`)
/// and `tail` words follow; `after_comma` when the text typed ends in one.
/// Options may open with the same word (`on means`, `on events by T`): the
/// words of the option being read are kept, and every option that takes
/// them is followed.
fn after_fixed(form: &Form, filled: &[(Slot, &str)], tail: &[&str], after_comma: bool, next: &mut Next) {
    if form.method {
        if let Some(at) = tail.iter().position(|w| *w == "with") {
            return method_next(&tail[at + 1..], next);
        }
    }
    if form.options.is_empty() && !form.method {
        return;
    }
    // the words of the option being read (a list such as `given A, B` or
    // `at z 2, w 3` repeats its values past the end)
    let mut inside: Vec<&str> = Vec::new();
    let mut used: Vec<&str> = Vec::new();
    let mut typed: Vec<(Slot, &str)> = filled.to_vec();
    for w in tail {
        let longer: Vec<&str> = inside.iter().copied().chain([*w]).collect();
        inside = if !inside.is_empty() && options_taking(form, &longer).next().is_some() {
            longer
        } else if form.options.iter().any(|o| o[0].accepts(w)) {
            vec![*w]
        } else {
            Vec::new()
        };
        if let Some(option) = options_taking(form, &inside).next() {
            typed.push((place(option, inside.len() - 1), *w));
            if inside.len() == 1 {
                used.extend(option[0].words());
            }
        }
    }
    let k = inside.len();
    let candidates: Vec<&[Slot]> = if inside.is_empty() { Vec::new() } else { options_taking(form, &inside).collect() };
    for option in candidates.iter().filter(|o| k < o.len()) {
        next.slot(&option[k], &typed);
    }
    let complete = candidates.iter().find(|o| k >= o.len());
    if !candidates.is_empty() && complete.is_none() {
        return;
    }
    let open: Vec<&'static str> = form.option_words().into_iter().filter(|w| !used.contains(w)).collect();
    next.add(&open);
    if form.method {
        next.add(&["with"]);
    }
    // a list of values goes on after an option ending in a value
    // (`given A, B`) or after fixed places ending in a word (`watch Y, Z`)
    let (list, boundary) = match complete {
        Some(option) if is_list(option) => (Some(place(option, k)), (k - 1) % (option.len() - 1) == 0),
        None if matches!(form.slots.last(), Some(Word(_))) => (Some(Value), true),
        _ => (None, false),
    };
    if let Some(slot) = list {
        let before: Vec<(Slot, &str)> = match slot {
            // a level's column is the word just typed, not the list's last
            Name(Lv) => typed.clone(),
            _ => filled.to_vec(),
        };
        next.slot(&slot, &before);
        let names_a_list = matches!(slot, Name(_)) || complete.is_none();
        if names_a_list && boundary && !after_comma && !tail.is_empty() {
            next.add(&[","]);
        }
    }
}

/// The options of `form` whose places take `words` (the option's first
/// word first; past a list's end, values that are no option word).
fn options_taking<'f>(form: &'f Form, words: &'f [&str]) -> impl Iterator<Item = &'f [Slot]> + 'f {
    form.options.iter().copied().filter(move |option| {
        words.iter().enumerate().all(|(i, w)| match i < option.len() {
            true => option[i].accepts(w),
            false => is_list(option) && !is_option_word(form, w),
        })
    })
}

/// Whether an option takes a list: its places after the first word are values.
fn is_list(option: &[Slot]) -> bool {
    option.len() >= 2 && option[1..].iter().all(Slot::is_value)
}

/// The place of an option's `i`-th word (0 is the option word), its values
/// repeating past the end for a list.
fn place(option: &[Slot], i: usize) -> Slot {
    if i < option.len() {
        option[i]
    } else {
        option[1 + (i - 1) % (option.len() - 1)]
    }
}

fn is_option_word(form: &Form, word: &str) -> bool {
    form.option_words().contains(&word) || (form.method && word == "with")
}

/// What may follow `with` and the words after it.
fn method_next(after: &[&str], next: &mut Next) {
    let Some((kind, options)) = after.split_first() else {
        return next.add(METHODS);
    };
    let keys = match *kind {
        "laplace" => LAPLACE_OPTIONS,
        "nuts" => NUTS_OPTIONS,
        _ => return,
    };
    if options.len() % 2 == 1 {
        match options.last() {
            Some(&"mass") if *kind == "nuts" => next.add(MASS_WORDS),
            _ => next.values = true,
        }
        return;
    }
    let used: Vec<&str> = options.iter().step_by(2).copied().collect();
    let open: Vec<&'static str> = keys.iter().filter(|k| !used.contains(k)).copied().collect();
    next.add(&open);
}

#[cfg(test)]
mod tests {
    //! Headers written as the README's "Statements" table documents them.
    use super::*;

    /// README, Statements: `mass` takes `diagonal` or `low-rank`, and an
    /// option once given is not offered again.
    #[test]
    fn the_mass_option_offers_its_two_words() {
        assert_eq!(next_words("fit m with nuts mass").words, MASS_WORDS);
        let after = next_words("fit m with nuts mass low-rank").words;
        assert!(after.contains(&"seed") && !after.contains(&"mass"), "{after:?}");
        assert!(!next_words("fit m with nuts seed").words.contains(&"diagonal"));
    }

    /// README, `contrast`: `on events by T` goes on with `by` and a time,
    /// `on quantile Q` with a share; the other options come only after the
    /// value, and `on` is not offered twice.
    #[test]
    fn a_scale_that_takes_a_value_asks_for_it_first() {
        let head = "contrast m: x 1 vs 0 on";
        assert_eq!(next_words(&format!("{head} events")).words, ["by"]);
        for typed in [format!("{head} events by"), format!("{head} quantile")] {
            let next = next_words(&typed);
            assert!(next.words.is_empty() && next.values, "after {typed:?}: {next:?}");
        }
        let scales = next_words(head).words;
        for scale in ["outcomes", "means", "scores", "log-times", "medians", "events", "quantile"] {
            assert!(scales.contains(&scale), "{scale} missing after `on`: {scales:?}");
        }
        for typed in [format!("{head} events by 30"), format!("{head} quantile 0.9"), format!("{head} medians")] {
            let words = next_words(&typed).words;
            assert!(words.contains(&"seed") && words.contains(&"at") && !words.contains(&"on"), "after {typed:?}: {words:?}");
        }
        assert_eq!(next_words(&format!("{head} medians seed")).words, Vec::<&str>::new());
    }

    #[test]
    fn a_header_keeps_its_values_and_hands_on_its_options() {
        let (kept, rest) = ASK_USING.read_n::<5>("ask total effect of x on y in g using t with nuts seed 2").unwrap();
        let [kind, x, y, g, t] = kept;
        assert_eq!((kind, x, y, g, t, rest), ("total", "x", "y", "g", "t", "with nuts seed 2"));
        assert_eq!(ASK.read("ask total effect of x on y in g using t"), Err(Mismatch { slot: 9 }));
        assert_eq!(ASK.read("ask some effect of x on y in g"), Err(Mismatch { slot: 1 }));
    }

    #[test]
    fn a_quoted_path_is_one_value_and_a_colon_is_a_word() {
        let r = TABLE.read("table t from \"my data, 2024.csv\"").unwrap();
        assert_eq!(r.kept, ["t", "\"my data, 2024.csv\""]);
        let r = CONTRAST_BETWEEN.read("contrast m: x 1 vs 0 at z 2, w 3").unwrap();
        assert_eq!((r.kept, r.rest), (vec!["m", "x", "1", "0"], "at z 2, w 3"));
    }

    #[test]
    fn every_form_starts_with_a_fixed_word() {
        assert!(FORMS.iter().all(|f| matches!(f.slots.first(), Some(Word(_)))));
        assert!(FORMS.iter().all(|f| f.options.iter().all(|o| matches!(o.first(), Some(Word(_))))));
    }

    /// The statement words of the README's "Statements" table, in its order.
    #[test]
    fn statement_words_are_those_the_readme_lists() {
        let readme = [
            "table", "graph", "ask", "paths", "implications", "model", "fit", "show", "export", "plot", "save",
            "contrast", "compare", "robustness", "score", "joint", "intervene", "simulate", "recover", "calibrate", "prior", "check",
            "intervals",
        ];
        assert_eq!(statement_words(), readme);
    }
}
