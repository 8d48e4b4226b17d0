// Typesetting the fitted equation: the small LaTeX subset the server writes (numbers, x, powers, \frac, \left( ...
// \right), \cos, \sin, \ln, \pi, \times, \cdot and thin spaces) turned into MathML, which the browser renders
// natively. Anything outside the subset falls back to the plain text.
const NS = "http://www.w3.org/1998/Math/MathML";
const FUNCTIONS = new Set(["cos", "sin", "tan", "exp", "ln", "log", "sqrt"]);
const SYMBOLS = { pi: ["mi", "π"], times: ["mo", "×"], cdot: ["mo", "·"], pm: ["mo", "±"], approx: ["mo", "≈"] };

function tokenize(text) {
  const tokens = [];
  const pattern = /\\[a-zA-Z]+|\\[,;!: ]|\d+(?:\.\d+)?|[a-zA-Z]|[{}^_()+\-=*/,[\]]|\s+/g;
  let match;
  let end = 0;
  while ((match = pattern.exec(text)) !== null) {
    if (match.index !== end) throw new Error(`cannot typeset ${text.slice(end, match.index)}`);
    end = pattern.lastIndex;
    if (!/^\s+$/.test(match[0])) tokens.push(match[0]);
  }
  if (end !== text.length) throw new Error("cannot typeset the rest");
  return tokens;
}

function node(name, text, attributes = {}) {
  const element = document.createElementNS(NS, name);
  if (text !== undefined) element.textContent = text;
  for (const [key, value] of Object.entries(attributes)) element.setAttribute(key, value);
  return element;
}

function row(children) {
  const element = node("mrow");
  element.append(...children);
  return element;
}

function parser(tokens) {
  let index = 0;
  const peek = () => tokens[index];
  const next = () => tokens[index++];

  function group() {
    if (peek() === "{") {
      next();
      const children = sequence("}");
      next();
      return row(children);
    }
    return atom();
  }

  function command(name) {
    if (name === "\\frac") {
      const fraction = node("mfrac");
      fraction.append(group(), group());
      return fraction;
    }
    if (name === "\\left" || name === "\\right") return node("mo", next(), { stretchy: "true" });
    if (/^\\[,;!: ]$/.test(name)) return node("mspace", undefined, { width: "0.17em" });
    const word = name.slice(1);
    if (FUNCTIONS.has(word)) return node("mi", word, { mathvariant: "normal" });
    if (SYMBOLS[word]) return node(SYMBOLS[word][0], SYMBOLS[word][1]);
    throw new Error(`unknown command ${name}`);
  }

  function atom() {
    const token = next();
    if (token === undefined) throw new Error("unexpected end");
    if (token.startsWith("\\")) return command(token);
    if (/^\d/.test(token)) return node("mn", token);
    if (/^[a-zA-Z]$/.test(token)) return node("mi", token);
    if (token === "-") return node("mo", "−");
    if (token === "*") return node("mo", "·");
    return node("mo", token);
  }

  function sequence(stop) {
    const children = [];
    while (index < tokens.length && peek() !== stop) {
      let base = peek() === "{" ? group() : atom();
      while (peek() === "^" || peek() === "_") {
        const kind = next() === "^" ? "msup" : "msub";
        const script = node(kind);
        script.append(base, group());
        base = script;
      }
      children.push(base);
    }
    return children;
  }

  return { sequence };
}

export function typeset(latex) {
  const math = node("math", undefined, { display: "block" });
  math.append(row(parser(tokenize(latex)).sequence(undefined)));
  return math;
}

export function typesetInto(container, latex, plain) {
  container.replaceChildren();
  try {
    container.append(typeset(latex));
  } catch {
    const code = document.createElement("code");
    code.textContent = plain;
    container.append(code);
  }
}
