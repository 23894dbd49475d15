// Replays the operation trace of `tidewise export` (trace.mem) through the reference
// arithmetic and compares every result word. Run:
//   iverilog -g2012 -o tb tw_ref_pkg.sv tw_mac_reg.sv tw_trace_tb.sv
//   vvp tb +trace=FOLDER/trace.mem +depth=N
// Prints "TRACE PASS ..." when every word matches, "MISMATCH ..." lines otherwise.
module tw_trace_tb;
  import tw_ref_pkg::*;

  // Words the bench can hold; a longer trace: iverilog -Ptw_trace_tb.MAX_DEPTH=N ...
  parameter int MAX_DEPTH = 1 << 20;
  logic [63:0] mem [0:MAX_DEPTH-1];
  string path;
  int depth;

  logic clk = 0;
  logic load = 0, en = 0;
  wide_t load_value, a, b, acc;
  int acc_bits, acc_policy;
  logic over;
  tw_mac_reg mac(.clk(clk), .load(load), .en(en), .load_value(load_value), .a(a), .b(b),
                 .acc_bits(acc_bits), .policy(acc_policy), .acc(acc), .over(over));

  task automatic tick;
    #1 clk = 1;
    #1 clk = 0;
  endtask

  // The word at position p, sign-extended.
  function automatic wide_t word(input int p);
    wide_t v;
    v = $signed(mem[p]);
    return v;
  endfunction

  int p, n, kind, errors, macs, updates, acc_overflows, clipped, records;
  int fa, fb, has_bias, fbias, out_word, out_frac, out_mode, out_policy;
  int frate, fdelta, st_word, st_frac, st_mode, st_policy, fx, w_word, w_frac, w_mode, w_policy;
  int base_a, base_b, base_x, base_thr, base_before, base_after;
  logic [63:0] thr_bias, thr_out, thr_step;
  wide_t bias, result, want_w, eta, delta, step, inc, w_new, prod;

  task automatic mismatch(input string what, input int at, input wide_t got, input wide_t want);
    errors = errors + 1;
    if (errors <= 10)
      $display("MISMATCH record %0d (%s) word %0d: reference %0d, trace %0d", records, what, at,
               got, want);
  endtask

  initial begin
    if (!$value$plusargs("trace=%s", path)) begin
      $display("BAD usage: +trace=PATH missing");
      $finish;
    end
    if (!$value$plusargs("depth=%d", depth) || depth < 1 || depth > MAX_DEPTH) begin
      $display("BAD usage: +depth=N (1 to %0d) missing", MAX_DEPTH);
      $finish;
    end
    $readmemh(path, mem, 0, depth - 1);
    p = 0; errors = 0; macs = 0; updates = 0; acc_overflows = 0; clipped = 0; records = 0;
    forever begin
      if (p >= depth) begin
        $display("BAD trace: no END record before word %0d", depth);
        $finish;
      end
      kind = mem[p];
      n = mem[p + 1];
      if (kind == 0) begin
        if (errors == 0)
          $display("TRACE PASS macs=%0d updates=%0d acc_overflows=%0d clipped=%0d", macs,
                   updates, acc_overflows, clipped);
        else
          $display("TRACE FAIL mismatches=%0d of %0d records", errors, records);
        $finish;
      end else if (kind == 1) begin
        // MAC: 1 n acc_bits acc_overflow frac_a frac_b has_bias frac_bias bias
        //      out_word out_frac out_rounding out_overflow thr_bias thr_out a[n] b[n] result
        acc_bits = mem[p + 2]; acc_policy = mem[p + 3];
        fa = mem[p + 4]; fb = mem[p + 5]; has_bias = mem[p + 6]; fbias = mem[p + 7];
        bias = word(p + 8);
        out_word = mem[p + 9]; out_frac = mem[p + 10]; out_mode = mem[p + 11];
        out_policy = mem[p + 12];
        thr_bias = mem[p + 13]; thr_out = mem[p + 14];
        base_a = p + 15; base_b = base_a + n;
        // The bias joins the register at the products' fraction (fa + fb).
        load_value = has_bias ? round_shift(bias, fbias - (fa + fb), out_mode, thr_bias) : 0;
        load = 1; tick; load = 0;
        for (int i = 0; i < n; i++) begin
          a = word(base_a + i); b = word(base_b + i);
          en = 1; tick; en = 0;
        end
        if (over) acc_overflows = acc_overflows + 1;
        result = round_shift(acc, (fa + fb) - out_frac, out_mode, thr_out);
        if (outside(result, out_word)) clipped = clipped + 1;
        result = fit(result, out_word, out_policy);
        want_w = word(base_b + n);
        if (result != want_w) mismatch("mac", base_b + n, result, want_w);
        macs = macs + 1;
        p = base_b + n + 1;
      end else if (kind == 2) begin
        // UPDATE: 2 n frac_rate frac_delta step_word step_frac step_rounding step_overflow
        //         frac_x w_word w_frac w_rounding w_overflow eta delta thr_step
        //         x[n] thr[n] before[n] step after[n]
        frate = mem[p + 2]; fdelta = mem[p + 3];
        st_word = mem[p + 4]; st_frac = mem[p + 5]; st_mode = mem[p + 6]; st_policy = mem[p + 7];
        fx = mem[p + 8];
        w_word = mem[p + 9]; w_frac = mem[p + 10]; w_mode = mem[p + 11]; w_policy = mem[p + 12];
        eta = word(p + 13); delta = word(p + 14); thr_step = mem[p + 15];
        base_x = p + 16; base_thr = base_x + n; base_before = base_thr + n;
        base_after = base_before + n + 1;
        step = requantize(eta * delta, (frate + fdelta) - st_frac, st_mode, thr_step, st_word,
                          st_policy);
        want_w = word(base_before + n);
        if (step != want_w) mismatch("step", base_before + n, step, want_w);
        for (int j = 0; j < n; j++) begin
          prod = step * word(base_x + j);
          if (prod == 0) w_new = word(base_before + j);
          else begin
            inc = round_shift(prod, (st_frac + fx) - w_frac, w_mode, mem[base_thr + j]);
            w_new = word(base_before + j) + inc;
            if (outside(w_new, w_word)) clipped = clipped + 1;
            w_new = fit(w_new, w_word, w_policy);
          end
          want_w = word(base_after + j);
          if (w_new != want_w) mismatch("row", base_after + j, w_new, want_w);
        end
        updates = updates + 1;
        p = base_after + n;
      end else begin
        $display("BAD trace: kind %0d at word %0d", kind, p);
        $finish;
      end
      records = records + 1;
    end
  end
endmodule
