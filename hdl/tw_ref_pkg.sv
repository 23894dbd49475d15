// Reference arithmetic of the tidewise fixed-point datapath, written from the trade's
// definitions and not from the tool's code: exact products, one rounding by an arithmetic
// right shift, then saturation or wrapping into the destination word. Every value is held
// in a 128-bit signed vector, so sign extension and `>>>` are the language's own (IEEE
// 1800-2017, 11.4.10 shift operators, 11.8.1 signedness of expressions).
package tw_ref_pkg;
  typedef logic signed [127:0] wide_t;

  localparam int FLOOR = 0;
  localparam int NEAREST_EVEN = 1;
  localparam int STOCHASTIC = 2;
  localparam int SATURATE = 0;
  localparam int WRAP = 1;

  // 2^k as a wide value.
  function automatic wide_t pow2(input int k);
    wide_t one;
    one = 1;
    return one <<< k;
  endfunction

  // Whether v lies outside a signed word of `bits` bits.
  function automatic logic outside(input wide_t v, input int bits);
    return (v > pow2(bits - 1) - 1) || (v < -pow2(bits - 1));
  endfunction

  // v fitted into a signed word of `bits` bits: clamped (SATURATE) or its low bits kept and
  // sign-extended again (WRAP).
  function automatic wide_t fit(input wide_t v, input int bits, input int policy);
    wide_t hi, lo, t;
    hi = pow2(bits - 1) - 1;
    lo = -pow2(bits - 1);
    if (v <= hi && v >= lo) return v;
    if (policy == SATURATE) return (v > hi) ? hi : lo;
    t = v <<< (128 - bits);
    return t >>> (128 - bits);
  endfunction

  // v scaled by 2^-s and rounded once: s <= 0 is an exact left shift; s > 0 drops s bits by
  // floor (the bare arithmetic shift), to nearest with ties to even, or stochastically
  // (round up when the threshold `thr`, uniform on [0, 2^s), is below the dropped bits).
  function automatic wide_t round_shift(input wide_t v, input int s, input int mode,
                                        input logic [63:0] thr);
    wide_t q, rem, half, t;
    if (s <= 0) return v <<< (-s);
    q = v >>> s;
    rem = v - (q <<< s);
    case (mode)
      FLOOR: return q;
      NEAREST_EVEN: begin
        half = pow2(s - 1);
        if (rem > half || (rem == half && q[0])) return q + 1;
        return q;
      end
      default: begin
        t = $signed({64'b0, thr});
        if (rem != 0 && t < rem) return q + 1;
        return q;
      end
    endcase
  endfunction

  // One requantisation: round by `s` bits, then fit into `bits` bits by `policy`.
  function automatic wide_t requantize(input wide_t v, input int s, input int mode,
                                       input logic [63:0] thr, input int bits,
                                       input int policy);
    return fit(round_shift(v, s, mode, thr), bits, policy);
  endfunction
endpackage
