namespace FedGrid.Learning.Policies;

/// <summary>
/// The bounded policy's distribution: u ~ N(μ, σ²) in an unbounded space, squashed by tanh and mapped affinely
/// onto the box [lo, hi]: a = lo + (hi − lo)·(tanh(u) + 1)/2. Its log-density on the box is
/// log N(u; μ, σ) − log(1 − tanh²u) − log((hi − lo)/2) (change of variables; the Jacobian of tanh and of the affine map).
/// The network's raw log-std output ρ is mapped smoothly into [min, max]: log σ = min + (max − min)·(tanh ρ + 1)/2.
/// </summary>
public static class SquashedGaussian
{
    private const double HalfLogTwoPi = 0.91893853320467274178;

    /// <summary>Maps an unbounded pre-squash value u into [lo, hi].</summary>
    /// <param name="u">Pre-squash value.</param>
    /// <param name="lo">Lower bound.</param>
    /// <param name="hi">Upper bound (≥ lo).</param>
    /// <returns>The action in [lo, hi].</returns>
    public static float Squash(float u, float lo, float hi) => lo + (hi - lo) * 0.5f * (MathF.Tanh(u) + 1f);

    /// <summary>log σ from the raw network output ρ: min + (max − min)(tanh ρ + 1)/2.</summary>
    /// <param name="raw">ρ.</param>
    /// <param name="logStdMin">Smallest log σ.</param>
    /// <param name="logStdMax">Largest log σ.</param>
    /// <returns>log σ.</returns>
    public static float LogStd(float raw, float logStdMin, float logStdMax) =>
        logStdMin + (logStdMax - logStdMin) * 0.5f * (MathF.Tanh(raw) + 1f);

    /// <summary>d log σ / dρ = (max − min)(1 − tanh²ρ)/2.</summary>
    /// <param name="raw">ρ.</param>
    /// <param name="logStdMin">Smallest log σ.</param>
    /// <param name="logStdMax">Largest log σ.</param>
    /// <returns>The derivative.</returns>
    public static float LogStdDerivative(float raw, float logStdMin, float logStdMax)
    {
        float t = MathF.Tanh(raw);
        return (logStdMax - logStdMin) * 0.5f * (1f - t * t);
    }

    /// <summary>log(1 − tanh²u), computed stably as 2(log 2 − u − softplus(−2u)).</summary>
    /// <param name="u">Pre-squash value.</param>
    /// <returns>The log-Jacobian of tanh at u.</returns>
    public static double LogTanhJacobian(double u)
    {
        double x = -2.0 * u;
        double softplus = x > 0 ? x + Math.Log(1 + Math.Exp(-x)) : Math.Log(1 + Math.Exp(x));
        return 2.0 * (Math.Log(2.0) - u - softplus);
    }

    /// <summary>Log-density of the bounded action whose pre-squash value is u, on the box [lo, hi].</summary>
    /// <param name="u">Pre-squash value.</param>
    /// <param name="mean">μ.</param>
    /// <param name="logStd">log σ.</param>
    /// <param name="lo">Lower bound.</param>
    /// <param name="hi">Upper bound (&gt; lo).</param>
    /// <returns>log π(a).</returns>
    public static double LogProb(double u, double mean, double logStd, double lo, double hi)
    {
        double eps = (u - mean) / Math.Exp(logStd);
        return -0.5 * eps * eps - logStd - HalfLogTwoPi - LogTanhJacobian(u) - Math.Log((hi - lo) / 2.0);
    }

    /// <summary>
    /// Gradient of log π with respect to μ and log σ at a fixed sample u (score function):
    /// ∂/∂μ = ε/σ and ∂/∂log σ = ε² − 1 with ε = (u − μ)/σ. The squash and box terms do not depend on μ or σ.
    /// </summary>
    /// <param name="u">Pre-squash value.</param>
    /// <param name="mean">μ.</param>
    /// <param name="logStd">log σ.</param>
    /// <param name="dMean">∂ log π / ∂μ.</param>
    /// <param name="dLogStd">∂ log π / ∂ log σ.</param>
    public static void LogProbGradient(float u, float mean, float logStd, out float dMean, out float dLogStd)
    {
        float sigma = MathF.Exp(logStd);
        float eps = (u - mean) / sigma;
        dMean = eps / sigma;
        dLogStd = eps * eps - 1f;
    }

    /// <summary>Entropy of the pre-squash Gaussian, ½log(2πe) + log σ (used as the entropy bonus; its gradient in log σ is 1).</summary>
    /// <param name="logStd">log σ.</param>
    /// <returns>The entropy in nats.</returns>
    public static double GaussianEntropy(double logStd) => 0.5 + HalfLogTwoPi + logStd;
}
