"""OpenQASM text to a syntax tree: a small tokenizer and a recursive-descent parser.

The grammar is the part of OpenQASM 2.0 (Cross, Bishop, Smolin and Gambetta,
arXiv:1707.03429, 2017) and of OpenQASM 3 (Cross et al., ACM Trans. Quantum Comput. 3, 12,
2022) that `qgradlib.circuits.qasm` reads: the version line, ``include``, register and
``input`` declarations, ``gate`` definitions, gate calls, ``barrier`` and ``measure``.
Statements outside it (``reset``, ``if``, ``opaque``, loops, subroutines, gate modifiers)
are refused here with their line and column. Nothing is evaluated and no file is opened:
this module only reads the text it is given.

The bounds that keep hostile input cheap are set here: `MAX_TEXT` characters,
`MAX_EXPRESSION_DEPTH` levels in the tree of an expression (nested parentheses, signs and
functions, and operators in a chain) and `MAX_NUMBER` characters in a
number literal. Every refusal is a `QasmError` that carries ``line`` and ``col`` (both
counted from 1).

Examples
--------
>>> program = parse('OPENQASM 2.0;\\ninclude "qelib1.inc";\\nqreg q[2];\\ncx q[0], q[1];')
>>> program.version, [type(s).__name__ for s in program.statements]
(2, ['Include', 'Register', 'Call'])
>>> parse("OPENQASM 2.0;\\nreset q[0];")
Traceback (most recent call last):
    ...
qgradlib.circuits.qasm_parse.QasmError: line 2, column 1: reset is not supported: ...
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from typing import NamedTuple

__all__ = ["QasmError", "parse", "tokens", "MAX_TEXT", "MAX_EXPRESSION_DEPTH", "MAX_NUMBER"]

MAX_TEXT = 1_000_000            # characters of program text
MAX_EXPRESSION_DEPTH = 100      # levels of an expression's tree: parentheses, operators, signs
MAX_NUMBER = 40                 # characters of one number literal

FUNCTIONS = ("sin", "cos", "tan", "exp", "ln", "sqrt")
# words that start statements this reader does not run; each is refused with the reason
REFUSED = {
    "reset": "a qgradlib circuit is a unitary (or noise) program and has no reset",
    "if": "classically controlled gates need classical control, which a qgradlib circuit lacks",
    "opaque": "an opaque gate has no definition to expand",
    "for": "loops are not part of the subset read here", "while": "loops are not part of the subset read here",
    "def": "subroutines are not part of the subset read here",
    "const": "constants are not part of the subset read here", "let": "aliases are not part of the subset read here",
    "ctrl": "gate modifiers are not part of the subset read here",
    "negctrl": "gate modifiers are not part of the subset read here",
    "inv": "gate modifiers are not part of the subset read here",
    "pow": "gate modifiers are not part of the subset read here",
    "delay": "timing is not part of the subset read here", "box": "timing is not part of the subset read here",
    "defcal": "calibrations are not part of the subset read here",
    "cal": "calibrations are not part of the subset read here",
    "extern": "extern functions are not part of the subset read here",
    "output": "output declarations are not part of the subset read here",
    "return": "subroutines are not part of the subset read here",
    "int": "classical variables are not part of the subset read here",
    "uint": "classical variables are not part of the subset read here",
    "bool": "classical variables are not part of the subset read here",
    "float": "classical variables other than input float[64] are not part of the subset read here",
    "angle": "classical variables are not part of the subset read here",
    "complex": "classical variables are not part of the subset read here",
    "array": "classical variables are not part of the subset read here",
}


class QasmError(ValueError):
    """A program that cannot be read, with the ``line`` and ``col`` (from 1) where it fails.

    The message starts with the position: ``line 3, column 9: ...``.

    Attributes
    ----------
    line, col : int
        Where the program fails, both counted from 1.
    reason : str
        The message without the position.

    Examples
    --------
    >>> import qgradlib as qg
    >>> try:
    ...     qg.from_qasm('OPENQASM 2.0;\\ninclude "../secrets.inc";')
    ... except qg.QasmError as err:
    ...     print(err.line, err.col)
    2 9
    """

    def __init__(self, message: str, line: int, col: int):
        super().__init__(f"line {line}, column {col}: {message}")
        self.line = line
        self.col = col
        self.reason = message


# -- tokens ----------------------------------------------------------------------------------
class Token(NamedTuple):
    kind: str      # "id", "int", "real", "string", "op" or "eof"
    text: str
    line: int
    col: int


# one alternative a token kind; a compiled scanner keeps a megabyte of text to a second or so
_SCAN = re.compile(r"""
   (?P<space>[ \t\r\f\v\n]+)
  |(?P<line_comment>//[^\n]*)
  |(?P<block_comment>/\*.*?\*/)
  |(?P<open_comment>/\*)
  |(?P<string>"[^"\n]*")
  |(?P<open_string>")
  |(?P<number>(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?)
  |(?P<id>[A-Za-z_][A-Za-z0-9_]*)
  |(?P<op>->|\*\*|==|!=|<=|>=|&&|\|\||<<|>>|\+\+|\+=|-=|[;,()\[\]{}+\-*/^=@<>!&|%~:$\#?.])
""", re.X | re.S)


def _bad_character(ch):
    if ch == "\0":
        return "NUL character in the program text"
    if ord(ch) > 127:
        return (f"non-ASCII character U+{ord(ch):04X}: OpenQASM is read as ASCII here (write pi "
                "for the constant)")
    return f"unexpected character {ch!r} (code {ord(ch)})"


def tokens(text: str) -> list:
    """The tokens of ``text`` (ending with an ``eof`` token); `QasmError` on a bad character,
    an unterminated string or comment, or an overlong number.

    Comments may hold any text except NUL (an author's name with accents, say); everywhere
    else the program is ASCII.

    Examples
    --------
    >>> [t.text for t in tokens("rz(pi/2) q[0]; // a comment")]
    ['rz', '(', 'pi', '/', '2', ')', 'q', '[', '0', ']', ';', '']
    """
    if not isinstance(text, str):
        raise TypeError(f"text must be a str holding an OpenQASM program; got {type(text).__name__}")
    if len(text) > MAX_TEXT:
        line = text.count("\n", 0, MAX_TEXT) + 1
        raise QasmError(f"the program is {len(text):,} characters long; at most {MAX_TEXT:,} are "
                        "read", line, MAX_TEXT - text.rfind("\n", 0, MAX_TEXT))
    out = []
    i, n, line, start = 0, len(text), 1, 0     # start: index of the first character of the line

    def fail(msg, at):
        before = text.count("\n", i, at)        # ``at`` may lie on a later line than ``i``
        first = text.rfind("\n", 0, at) + 1 if before else start
        raise QasmError(msg, line + before, at - first + 1)

    for m in _SCAN.finditer(text):
        if m.start() != i:          # the scanner skipped a character no token starts with
            fail(_bad_character(text[i]), i)
        kind, body, end = m.lastgroup, m.group(), m.end()
        if kind == "space":
            if "\n" in body:
                line += body.count("\n")
                start = i + body.rfind("\n") + 1
        elif kind in ("line_comment", "block_comment"):
            if "\0" in body:
                fail("NUL character in a comment", i + body.index("\0"))
            if kind == "block_comment" and "\n" in body:
                line += body.count("\n")
                start = i + body.rfind("\n") + 1
        elif kind == "open_comment":
            fail("unterminated comment: /* without */", i)
        elif kind == "open_string":
            fail('unterminated string: a " without its closing " on the same line', i)
        else:
            if kind == "string":
                bad = [k for k, c in enumerate(body) if ord(c) > 127 or c == "\0"]
                if bad:
                    fail("non-ASCII or NUL character in a string", i + bad[0])
                body = body[1:-1]
            elif kind == "number":
                if len(body) > MAX_NUMBER:
                    fail(f"number literal of {len(body)} characters; at most {MAX_NUMBER} are read", i)
                if end < n and (text[end].isalpha() or text[end] == "_"):
                    fail(f"bad number {text[i:end + 1]!r}: a letter directly after digits", i)
                kind = "real" if any(c in body for c in ".eE") else "int"
            out.append(Token(kind, body, line, i - start + 1))
        i = end
    if i != n:
        fail(_bad_character(text[i]), i)
    out.append(Token("eof", "", line, i - start + 1))
    return out


# -- the syntax tree -------------------------------------------------------------------------
@dataclass(frozen=True)
class Num:
    value: float
    line: int
    col: int


@dataclass(frozen=True)
class Name:
    name: str
    line: int
    col: int


@dataclass(frozen=True)
class Unary:
    op: str         # "-" or "+"
    arg: object
    line: int
    col: int


@dataclass(frozen=True)
class Binary:
    op: str         # "+", "-", "*", "/", "^"
    left: object
    right: object
    line: int
    col: int


@dataclass(frozen=True)
class Function:
    name: str
    arg: object
    line: int
    col: int


@dataclass(frozen=True)
class Operand:
    """A register (``index`` None) or one of its bits (``q[3]``)."""
    name: str
    index: int | None
    line: int
    col: int


@dataclass(frozen=True)
class Include:
    path: str
    line: int
    col: int


@dataclass(frozen=True)
class Register:
    kind: str       # "quantum" or "classical"
    name: str
    size: int
    line: int
    col: int


@dataclass(frozen=True)
class Input:
    name: str
    line: int
    col: int


@dataclass(frozen=True)
class Call:
    name: str
    args: tuple     # expressions
    operands: tuple
    line: int
    col: int


@dataclass(frozen=True)
class Barrier:
    operands: tuple
    line: int
    col: int


@dataclass(frozen=True)
class Measure:
    qubits: Operand
    target: Operand | None
    line: int
    col: int


@dataclass(frozen=True)
class GateDef:
    name: str
    params: tuple   # Name tokens of the angle parameters
    qubits: tuple   # Name tokens of the qubit arguments
    body: tuple     # Call and Barrier statements
    line: int
    col: int


@dataclass(frozen=True)
class Program:
    version: int    # 2 or 3
    statements: tuple
    line: int       # where the text ends
    col: int


# -- the parser ------------------------------------------------------------------------------
class _Parser:
    def __init__(self, toks):
        self.toks = toks
        self.i = 0
        self.version = None
        self.depth = 0

    # token helpers
    @property
    def tok(self):
        return self.toks[self.i]

    def peek(self, k=1):
        return self.toks[min(self.i + k, len(self.toks) - 1)]

    def fail(self, msg, tok=None):
        tok = tok or self.tok
        raise QasmError(msg, tok.line, tok.col)

    def show(self, tok):
        return "the end of the program" if tok.kind == "eof" else repr(tok.text)

    def take(self):
        tok = self.tok
        self.i += 1
        return tok

    def at(self, text):
        return self.tok.kind in ("op", "id") and self.tok.text == text

    def expect(self, text, what=None):
        if not self.at(text):
            self.fail(f"expected {what or repr(text)}, found {self.show(self.tok)}")
        return self.take()

    def ident(self, what):
        if self.tok.kind != "id":
            self.fail(f"expected {what}, found {self.show(self.tok)}")
        return self.take()

    def integer(self, what):
        if self.tok.kind != "int":
            self.fail(f"expected {what} (a non-negative integer), found {self.show(self.tok)}")
        return self.take()

    # program
    def program(self):
        if not self.at("OPENQASM"):
            self.fail("a program starts with its version line, OPENQASM 2.0; or OPENQASM 3.0;")
        self.take()
        v = self.tok
        if v.kind not in ("int", "real") or v.text not in ("2.0", "3", "3.0"):
            self.fail(f"OpenQASM version {v.text or '(none)'} is not read here; write 2.0 or 3.0", v)
        self.take()
        self.version = 2 if v.text == "2.0" else 3
        self.expect(";")
        out = []
        while self.tok.kind != "eof":
            out.append(self.statement())
        return Program(self.version, tuple(out), self.tok.line, self.tok.col)

    def statement(self):
        tok = self.tok
        if tok.kind != "id":
            self.fail(f"expected a statement, found {self.show(tok)}")
        word = tok.text
        if word == "OPENQASM":
            self.fail("the version line may appear only once, at the start")
        if word == "include":
            self.take()
            path = self.tok
            if path.kind != "string":
                self.fail('expected a file name in double quotes after include')
            self.take()
            self.expect(";")
            return Include(path.text, path.line, path.col)
        if word in ("qreg", "creg"):
            self.take()
            name = self.ident("a register name")
            self.expect("[")
            size = self.integer("a register size")
            self.expect("]")
            self.expect(";")
            return Register("quantum" if word == "qreg" else "classical", name.text,
                            self.size(size), name.line, name.col)
        if word in ("qubit", "bit") and self.version == 3:
            self.take()
            size = None
            if self.at("["):
                self.take()
                size = self.integer("a register size")
                self.expect("]")
            name = self.ident("a register name")
            self.expect(";")
            return Register("quantum" if word == "qubit" else "classical", name.text,
                            1 if size is None else self.size(size), name.line, name.col)
        if word == "input":
            if self.version != 3:
                self.fail("input declarations belong to OpenQASM 3: start the program with "
                          "OPENQASM 3.0;")
            self.take()
            self.expect("float", "the type float[64] (inputs are read as real angles)")
            if self.at("["):
                self.take()
                width = self.integer("a float width")
                if width.text != "64":
                    self.fail(f"input float[{width.text}] is not read here; declare float[64]", width)
                self.expect("]")
            name = self.ident("an input name")
            self.expect(";")
            return Input(name.text, name.line, name.col)
        if word == "gate":
            return self.gate_definition()
        if word == "barrier":
            self.take()
            ops = () if self.at(";") else self.operands()
            self.expect(";")
            return Barrier(ops, tok.line, tok.col)
        if word == "measure":
            self.take()
            qubits = self.operand()
            target = None
            if self.at("->"):
                self.take()
                target = self.operand()
            self.expect(";")
            return Measure(qubits, target, tok.line, tok.col)
        if word in REFUSED:
            self.fail(f"{word} is not supported: {REFUSED[word]}")
        if self.version == 3 and self._assignment_ahead():
            target = self.operand()
            self.expect("=")
            m = self.expect("measure", "measure (the only assignment read here is c = measure q;)")
            qubits = self.operand()
            self.expect(";")
            return Measure(qubits, target, m.line, m.col)
        return self.call(top=True)

    def _assignment_ahead(self):
        k = 1
        if self.peek(k).text == "[":
            k += 3
        return self.peek(k).kind == "op" and self.peek(k).text == "="

    def size(self, tok):
        # the value is bounded by the reader; here only the literal's length (already bounded)
        return int(tok.text)

    def gate_definition(self):
        self.take()
        name = self.ident("a gate name")
        params = ()
        if self.at("("):
            self.take()
            params = () if self.at(")") else self.names("a parameter name")
            self.expect(")")
        qubits = self.names("a qubit argument name")
        self.expect("{")
        body = []
        while not self.at("}"):
            tok = self.tok
            if tok.kind == "eof":
                self.fail(f"gate {name.text!r} has no closing }}", name)
            if tok.kind == "id" and tok.text == "barrier":
                self.take()
                ops = self.operands()
                self.expect(";")
                body.append(Barrier(ops, tok.line, tok.col))
                continue
            if tok.kind == "id" and tok.text in REFUSED:
                self.fail(f"{tok.text} is not supported: {REFUSED[tok.text]}")
            if tok.kind != "id" or tok.text in ("measure", "gate", "qreg", "creg", "include",
                                                 "qubit", "bit", "input"):
                self.fail(f"a gate body holds gate calls and barriers only; found {self.show(tok)}")
            body.append(self.call(top=False))
        self.take()
        return GateDef(name.text, params, qubits, tuple(body), name.line, name.col)

    def names(self, what):
        out = [self.ident(what)]
        while self.at(","):
            self.take()
            out.append(self.ident(what))
        return tuple(Name(t.text, t.line, t.col) for t in out)

    def call(self, top):
        name = self.ident("a gate name")
        args = ()
        if self.at("("):
            self.take()
            args = () if self.at(")") else self.expressions()
            self.expect(")")
        ops = () if (self.at(";") and self.version == 3) else self.operands(indexed=top)
        self.expect(";")
        return Call(name.text, args, ops, name.line, name.col)

    def operands(self, indexed=True):
        out = [self.operand(indexed)]
        while self.at(","):
            self.take()
            out.append(self.operand(indexed))
        return tuple(out)

    def operand(self, indexed=True):
        name = self.ident("a qubit or register")
        index = None
        if self.at("["):
            if not indexed:
                self.fail("inside a gate body, qubits are the gate's arguments by name (no index)")
            self.take()
            idx = self.integer("a bit index")
            index = int(idx.text)
            self.expect("]", "']' (one index; slices and index sets are not read here)")
        return Operand(name.text, index, name.line, name.col)

    # expressions:  sum := product (('+'|'-') product)* ; product := signed (('*'|'/') signed)*
    #               signed := ('-'|'+') signed | power ; power := atom ('^' signed)?
    def expressions(self):
        out = [self.expression()]
        while self.at(","):
            self.take()
            out.append(self.expression())
        return tuple(out)

    def deeper(self):
        self.depth += 1
        if self.depth > MAX_EXPRESSION_DEPTH:
            self.fail(f"expression nested more than {MAX_EXPRESSION_DEPTH} levels deep")

    # each operator of a chain such as 1+1+...+1 is a level of the tree as well: evaluating
    # the tree recurses through its depth, which must stay far below Python's recursion limit
    def expression(self):
        level = self.depth
        self.deeper()
        left = self.product()
        while self.tok.kind == "op" and self.tok.text in "+-":
            self.deeper()
            op = self.take()
            left = Binary(op.text, left, self.product(), op.line, op.col)
        self.depth = level
        return left

    def product(self):
        level = self.depth
        left = self.signed()
        while self.tok.kind == "op" and self.tok.text in ("*", "/"):
            self.deeper()
            op = self.take()
            left = Binary(op.text, left, self.signed(), op.line, op.col)
        self.depth = level
        return left

    def signed(self):
        if self.tok.kind == "op" and self.tok.text in "+-":
            self.deeper()
            op = self.take()
            out = Unary(op.text, self.signed(), op.line, op.col)
            self.depth -= 1
            return out
        return self.power()

    def power(self):
        base = self.atom()
        tok = self.tok
        if tok.kind == "op" and tok.text in ("^", "**"):
            if tok.text == "^" and self.version == 3:
                self.fail("in OpenQASM 3, ^ is the bitwise xor; write ** for a power")
            if tok.text == "**" and self.version == 2:
                self.fail("in OpenQASM 2, a power is written ^")
            self.deeper()
            self.take()
            out = Binary("^", base, self.signed(), tok.line, tok.col)
            self.depth -= 1
            return out
        return base

    def atom(self):
        tok = self.tok
        if tok.kind in ("int", "real"):
            self.take()
            return Num(float(tok.text), tok.line, tok.col)
        if tok.kind == "id":
            self.take()
            if tok.text in FUNCTIONS:
                self.expect("(", f"'(' after the function {tok.text}")
                arg = self.expression()
                self.expect(")")
                return Function(tok.text, arg, tok.line, tok.col)
            return Name(tok.text, tok.line, tok.col)
        if self.at("("):
            self.take()
            inner = self.expression()
            self.expect(")")
            return inner
        self.fail(f"expected a number, a name or '(' in an expression, found {self.show(tok)}")


def parse(text: str) -> Program:
    """The syntax tree of an OpenQASM 2.0 or 3 program (`QasmError` where it cannot be read).

    Examples
    --------
    >>> p = parse("OPENQASM 3.0;\\ninput float[64] theta0;\\nqubit[1] q;\\nrx(theta0 / 2) q[0];")
    >>> p.version, p.statements[2].args[0].op
    (3, '/')
    """
    return _Parser(tokens(text)).program()
