// Counts N oscillator frequencies over a gate time and prints one text-protocol line per gate:
//   t_s,left_sleeve,right_sleeve,left_front,right_front
//   0.0200,181200.0,250800.0,331000.0,429800.0
// An example for drape, not part of it. Requirements: a 32-bit microcontroller board with
// pin-change interrupts on four pins, a microsecond timer and a USB serial port, fast enough
// for tens of thousands of pin interrupts per second; written in the common setup()/loop()
// C++ style (attachInterrupt, micros, Serial): adapt the calls to your board's toolchain.
//
// Each LC oscillator's output goes through a divide-by-PRESCALE counter (one stage of a
// binary ripple-counter chip) to an interrupt-capable pin, so the board sees a few kHz, not hundreds.
// See README.md beside this file for wiring and cautions.

const uint8_t N_CHANNELS = 4;
const uint8_t PINS[N_CHANNELS] = {2, 3, 4, 5};
const char *NAMES[N_CHANNELS] = {"left_sleeve", "right_sleeve", "left_front", "right_front"};
const uint32_t PRESCALE = 16;        // external divider ratio in front of each pin
const uint32_t GATE_US = 20000;      // gate time: 20 ms, 50 samples per second
const uint32_t BAUD = 115200;        // ignored by native-USB boards

volatile uint32_t counts[N_CHANNELS];

void edge0() { counts[0]++; }
void edge1() { counts[1]++; }
void edge2() { counts[2]++; }
void edge3() { counts[3]++; }
void (*const HANDLERS[N_CHANNELS])() = {edge0, edge1, edge2, edge3};

uint32_t gate_start_us;
uint32_t first_us;

void setup() {
  Serial.begin(BAUD);
  while (!Serial && millis() < 3000) {}   // wait briefly for a USB host, then run anyway
  for (uint8_t i = 0; i < N_CHANNELS; i++) {
    pinMode(PINS[i], INPUT);
    attachInterrupt(digitalPinToInterrupt(PINS[i]), HANDLERS[i], RISING);
  }
  Serial.println("# drape text protocol 1, counter_text example");
  Serial.print("t_s");
  for (uint8_t i = 0; i < N_CHANNELS; i++) { Serial.print(','); Serial.print(NAMES[i]); }
  Serial.println();
  first_us = gate_start_us = micros();
}

void loop() {
  uint32_t now = micros();
  if ((uint32_t)(now - gate_start_us) < GATE_US) return;
  uint32_t snap[N_CHANNELS];
  noInterrupts();                          // take all counts at one instant
  for (uint8_t i = 0; i < N_CHANNELS; i++) { snap[i] = counts[i]; counts[i] = 0; }
  interrupts();
  // Use the gate actually elapsed (loop() may be late), so the frequency stays right.
  float gate_s = (uint32_t)(now - gate_start_us) * 1e-6f;
  gate_start_us = now;
  Serial.print((uint32_t)(now - first_us) * 1e-6f, 4);   // device time, s (wraps after ~71 min)
  for (uint8_t i = 0; i < N_CHANNELS; i++) {
    Serial.print(',');
    Serial.print(snap[i] * (float)PRESCALE / gate_s, 1); // Hz at the oscillator
  }
  Serial.println();
}
