namespace FedGrid.Federation.Privacy;

/// <summary>How Rényi DP is converted to (ε, δ).</summary>
public enum RdpConversion
{
    /// <summary>ε = RDP(α) + log(1/δ)/(α − 1) (Mironov 2017, Proposition 3).</summary>
    Standard,

    /// <summary>
    /// ε = RDP(α) + log((α − 1)/α) − (log δ + log α)/(α − 1) (Balle, Barthe, Gaboardi, Hsu &amp; Sato 2020; Canonne,
    /// Kamath &amp; Steinke 2020), never larger than the standard one for α &gt; 1.
    /// </summary>
    Improved,
}

/// <summary>An (ε, δ) guarantee and the Rényi order that gave it.</summary>
/// <param name="Epsilon">ε.</param>
/// <param name="Delta">δ.</param>
/// <param name="Order">The order α at which the minimum was attained.</param>
public sealed record PrivacyGuarantee(double Epsilon, double Delta, double Order);

/// <summary>
/// Rényi differential privacy accountant (Mironov 2017) for the sampled Gaussian mechanism: each step samples every
/// household (or record) with probability q and adds Gaussian noise of standard deviation σ times the L2 sensitivity.
/// The RDP of one step at order α is log(A_α)/(α − 1) with A_α = E_{z∼N(0,σ²)}[((1−q) + q·e^{(2z−1)/(2σ²)})^α]
/// (Mironov, Talwar &amp; Zhang 2019): for integer α the binomial sum
/// A_α = Σ_k C(α,k)(1−q)^{α−k} q^k e^{(k²−k)/(2σ²)}; for fractional α the convergent two-part series with
/// complementary error functions of their §3.3. Compositions add per order; ε is the minimum over orders of the
/// chosen <see cref="RdpConversion"/>. Without subsampling (q = 1) the RDP is the closed form α/(2σ²).
/// </summary>
public sealed class RenyiDpAccountant
{
    private readonly double[] _orders;
    private readonly double[] _rdp;

    /// <summary>Creates an accountant over the given orders (all &gt; 1), or <see cref="DefaultOrders"/>.</summary>
    /// <param name="orders">Rényi orders α.</param>
    public RenyiDpAccountant(IReadOnlyList<double>? orders = null)
    {
        IReadOnlyList<double> list = orders ?? DefaultOrders;
        if (list.Count == 0)
        {
            throw new ArgumentException("the accountant needs at least one order", nameof(orders));
        }
        _orders = new double[list.Count];
        for (int i = 0; i < list.Count; i++)
        {
            if (!(list[i] > 1) || !double.IsFinite(list[i]))
            {
                throw new ArgumentOutOfRangeException(nameof(orders), list[i], "Rényi orders must be finite and above 1");
            }
            _orders[i] = list[i];
        }
        _rdp = new double[_orders.Length];
    }

    /// <summary>Default orders: 1.25 … 12 in quarter steps, 13 … 64, then 80, 96, 128, 192, 256.</summary>
    public static IReadOnlyList<double> DefaultOrders { get; } = BuildDefaultOrders();

    /// <summary>The orders α.</summary>
    public ReadOnlySpan<double> Orders => _orders;

    /// <summary>The accumulated RDP per order.</summary>
    public ReadOnlySpan<double> Rdp => _rdp;

    /// <summary>Composes <paramref name="steps"/> steps of the sampled Gaussian mechanism.</summary>
    /// <param name="samplingRate">q in [0, 1].</param>
    /// <param name="noiseMultiplier">σ &gt; 0 (noise standard deviation over the L2 sensitivity).</param>
    /// <param name="steps">Number of steps (≥ 0).</param>
    public void AddSampledGaussian(double samplingRate, double noiseMultiplier, long steps)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(steps);
        for (int i = 0; i < _orders.Length; i++)
        {
            _rdp[i] += steps * SampledGaussianRdp(samplingRate, noiseMultiplier, _orders[i]);
        }
    }

    /// <summary>Forgets everything composed so far.</summary>
    public void Reset() => Array.Clear(_rdp);

    /// <summary>The smallest ε over the orders for a given δ.</summary>
    /// <param name="delta">δ in (0, 1).</param>
    /// <param name="conversion">RDP → (ε, δ) conversion.</param>
    /// <returns>The guarantee (ε ≥ 0).</returns>
    public PrivacyGuarantee GetEpsilon(double delta, RdpConversion conversion = RdpConversion.Standard)
    {
        if (!(delta > 0 && delta < 1))
        {
            throw new ArgumentOutOfRangeException(nameof(delta), delta, "δ must be in (0, 1)");
        }
        double best = double.PositiveInfinity, order = _orders[0];
        for (int i = 0; i < _orders.Length; i++)
        {
            double e = ToEpsilon(_rdp[i], _orders[i], delta, conversion);
            if (e < best)
            {
                best = e;
                order = _orders[i];
            }
        }
        return new PrivacyGuarantee(Math.Max(0, best), delta, order);
    }

    /// <summary>Converts one order's RDP to ε.</summary>
    /// <param name="rdp">RDP at order α.</param>
    /// <param name="order">α &gt; 1.</param>
    /// <param name="delta">δ in (0, 1).</param>
    /// <param name="conversion">Conversion.</param>
    /// <returns>ε (may be negative for tiny RDP; <see cref="GetEpsilon"/> clamps at 0).</returns>
    public static double ToEpsilon(double rdp, double order, double delta, RdpConversion conversion) => conversion switch
    {
        RdpConversion.Standard => rdp + Math.Log(1 / delta) / (order - 1),
        RdpConversion.Improved => rdp + Math.Log((order - 1) / order) - (Math.Log(delta) + Math.Log(order)) / (order - 1),
        _ => throw new ArgumentOutOfRangeException(nameof(conversion), conversion, "unknown conversion"),
    };

    /// <summary>RDP of one step of the sampled Gaussian mechanism at order α.</summary>
    /// <param name="samplingRate">q in [0, 1].</param>
    /// <param name="noiseMultiplier">σ &gt; 0.</param>
    /// <param name="order">α &gt; 1.</param>
    /// <returns>ε(α) ≥ 0 (infinite when it overflows double precision).</returns>
    public static double SampledGaussianRdp(double samplingRate, double noiseMultiplier, double order)
    {
        if (!(samplingRate >= 0 && samplingRate <= 1))
        {
            throw new ArgumentOutOfRangeException(nameof(samplingRate), samplingRate, "the sampling rate must be in [0, 1]");
        }
        if (!(noiseMultiplier > 0) || !double.IsFinite(noiseMultiplier))
        {
            throw new ArgumentOutOfRangeException(nameof(noiseMultiplier), noiseMultiplier, "the noise multiplier must be positive and finite");
        }
        if (!(order > 1) || !double.IsFinite(order))
        {
            throw new ArgumentOutOfRangeException(nameof(order), order, "the Rényi order must be finite and above 1");
        }
        if (samplingRate == 0)
        {
            return 0;
        }
        if (samplingRate == 1)
        {
            return order / (2 * noiseMultiplier * noiseMultiplier);
        }
        double logA = order == Math.Floor(order) && order <= int.MaxValue
            ? LogAInteger(samplingRate, noiseMultiplier, (int)order)
            : LogAFractional(samplingRate, noiseMultiplier, order);
        return Math.Max(0, logA / (order - 1));
    }

    /// <summary>log A_α by the binomial expansion (MTZ 2019, integer α).</summary>
    private static double LogAInteger(double q, double sigma, int alpha)
    {
        double logQ = Math.Log(q), log1mQ = Math.Log(1 - q), twoVar = 2 * sigma * sigma;
        var sum = new SignedLogSum();
        double logBinom = 0; // log C(α, 0)
        for (int k = 0; k <= alpha; k++)
        {
            if (k > 0)
            {
                logBinom += Math.Log(alpha - k + 1) - Math.Log(k);
            }
            sum.Add(logBinom + k * logQ + (alpha - k) * log1mQ + ((double)k * k - k) / twoVar, 1);
        }
        return sum.Log();
    }

    /// <summary>
    /// log A_α for fractional α (MTZ 2019, §3.3): with z₀ = σ² log(1/q − 1) + 1/2,
    /// A_α = Σ_{i≥0} C(α,i) [ (1−q)^{α−i} q^i e^{(i²−i)/(2σ²)} · ½erfc((i − z₀)/(√2σ))
    ///                     + q^{α−i} (1−q)^i e^{((α−i)²−(α−i))/(2σ²)} · ½erfc((z₀ − (α−i))/(√2σ)) ],
    /// with the generalised binomial coefficient C(α,i), whose sign alternates once i &gt; α + 1.
    /// </summary>
    private static double LogAFractional(double q, double sigma, double alpha)
    {
        double logQ = Math.Log(q), log1mQ = Math.Log(1 - q), twoVar = 2 * sigma * sigma;
        double z0 = sigma * sigma * Math.Log(1 / q - 1) + 0.5;
        double rootTwoSigma = Math.Sqrt(2) * sigma;
        var sum = new SignedLogSum();
        double logBinom = 0;
        int sign = 1;
        double peak = double.NegativeInfinity;
        for (int i = 0; i < 100_000; i++)
        {
            if (i > 0)
            {
                double factor = (alpha - i + 1) / i;
                sign *= Math.Sign(factor);
                logBinom += Math.Log(Math.Abs(factor));
            }
            double j = alpha - i;
            double t0 = logBinom + i * logQ + j * log1mQ + ((double)i * i - i) / twoVar + Math.Log(0.5) + SpecialFunctions.LogErfc((i - z0) / rootTwoSigma);
            double t1 = logBinom + j * logQ + i * log1mQ + (j * j - j) / twoVar + Math.Log(0.5) + SpecialFunctions.LogErfc((z0 - j) / rootTwoSigma);
            sum.Add(t0, sign);
            sum.Add(t1, sign);
            peak = Math.Max(peak, Math.Max(t0, t1));
            if (i > alpha + 1 && Math.Max(t0, t1) < peak - 45)
            {
                break; // terms now decrease geometrically; the rest is below 1e-19 of the largest
            }
        }
        return sum.Log();
    }

    private static double[] BuildDefaultOrders()
    {
        var orders = new List<double>();
        for (double a = 1.25; a <= 12; a += 0.25)
        {
            orders.Add(a);
        }
        for (int a = 13; a <= 64; a++)
        {
            orders.Add(a);
        }
        orders.AddRange([80, 96, 128, 192, 256]);
        return [.. orders];
    }

    /// <summary>Σ sign_k · e^{x_k} kept as a scaled sum (rescaled when a larger term arrives).</summary>
    private struct SignedLogSum
    {
        private double _max;
        private double _scaled;
        private bool _any;

        public void Add(double logTerm, int sign)
        {
            if (double.IsNegativeInfinity(logTerm))
            {
                return;
            }
            if (!_any)
            {
                _max = logTerm;
                _scaled = sign;
                _any = true;
                return;
            }
            if (logTerm > _max)
            {
                _scaled = _scaled * Math.Exp(_max - logTerm) + sign;
                _max = logTerm;
            }
            else
            {
                _scaled += sign * Math.Exp(logTerm - _max);
            }
        }

        public readonly double Log() => _any && _scaled > 0 ? _max + Math.Log(_scaled) : double.NaN;
    }
}
