// A multiply-accumulate register of run-time width: `load` puts a (bias) value into the
// register, each `en` cycle adds the exact product a*b, and after every load or addition the
// register's policy (saturate or wrap) brings the sum back into `acc_bits` bits. `over` is
// sticky from the last load: it tells whether any partial sum left the range.
module tw_mac_reg
  import tw_ref_pkg::*;
(
  input  logic  clk,
  input  logic  load,
  input  logic  en,
  input  wide_t load_value,
  input  wide_t a,
  input  wide_t b,
  input  int    acc_bits,
  input  int    policy,
  output wide_t acc,
  output logic  over
);
  wide_t next;
  always @(posedge clk) begin
    if (load) begin
      next = load_value;
      acc  <= fit(next, acc_bits, policy);
      over <= outside(next, acc_bits);
    end else if (en) begin
      next = acc + a * b;
      acc  <= fit(next, acc_bits, policy);
      over <= over | outside(next, acc_bits);
    end
  end
endmodule
