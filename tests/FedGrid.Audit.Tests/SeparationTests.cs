using System.Reflection;
using System.Reflection.Emit;
using FedGrid.Audit.Attacks;
using FedGrid.Audit.Scoring;

namespace FedGrid.Audit.Tests;

/// <summary>
/// Attack code cannot reach ground truth: no type in FedGrid.Audit.Attacks takes, returns, stores or touches (in any
/// method body) a type of FedGrid.Audit.Scoring, and the ground truth has no public reader.
/// </summary>
public sealed class SeparationTests
{
    private const string ScoringNamespace = "FedGrid.Audit.Scoring";
    private const BindingFlags All = BindingFlags.Public | BindingFlags.NonPublic | BindingFlags.Instance | BindingFlags.Static | BindingFlags.DeclaredOnly;

    private static readonly Type[] AttackTypes = typeof(Auditor).Assembly.GetTypes()
        .Where(t => t.Namespace == "FedGrid.Audit.Attacks" || (t.DeclaringType?.Namespace == "FedGrid.Audit.Attacks")).ToArray();

    private static bool IsScoring(Type? t)
    {
        if (t is null) return false;
        if (t.HasElementType) return IsScoring(t.GetElementType());
        if (t.IsGenericType && t.GetGenericArguments().Any(IsScoring)) return true;
        return t.Namespace == ScoringNamespace;
    }

    [Fact]
    public void The_attack_namespace_holds_every_attack()
    {
        Assert.Contains(typeof(PartialSumInversion), AttackTypes);
        Assert.Contains(typeof(SubspaceAttack), AttackTypes);
        Assert.Contains(typeof(UploadRatioAttack), AttackTypes);
        Assert.Contains(typeof(ProjectionInputAttack), AttackTypes);
        Assert.Contains(typeof(PhysicalFloorAttack), AttackTypes);
        Assert.Contains(typeof(JointAttack), AttackTypes);
        Assert.Contains(typeof(OccupancyAttack), AttackTypes);
        Assert.True(IsScoring(typeof(GroundTruth)));
        Assert.True(IsScoring(typeof(GroundTruth[])));
        Assert.True(IsScoring(typeof(List<ScoreCard>)));
    }

    [Fact]
    public void No_attack_signature_or_field_mentions_a_scoring_type()
    {
        foreach (Type t in AttackTypes)
        {
            Assert.False(IsScoring(t.BaseType), $"{t} derives from a scoring type");
            foreach (FieldInfo f in t.GetFields(All)) Assert.False(IsScoring(f.FieldType), $"{t}.{f.Name} is a {f.FieldType}");
            foreach (PropertyInfo p in t.GetProperties(All)) Assert.False(IsScoring(p.PropertyType), $"{t}.{p.Name} is a {p.PropertyType}");
            foreach (MethodBase m in t.GetMethods(All).Cast<MethodBase>().Concat(t.GetConstructors(All)))
            {
                foreach (ParameterInfo p in m.GetParameters()) Assert.False(IsScoring(p.ParameterType), $"{t}.{m.Name} takes a {p.ParameterType}");
                if (m is MethodInfo mi) Assert.False(IsScoring(mi.ReturnType), $"{t}.{m.Name} returns a {mi.ReturnType}");
                if (m.GetMethodBody() is { } body)
                    foreach (LocalVariableInfo l in body.LocalVariables) Assert.False(IsScoring(l.LocalType), $"{t}.{m.Name} has a local {l.LocalType}");
            }
        }
    }

    [Fact]
    public void No_attack_method_body_references_a_scoring_member()
    {
        int scanned = 0;
        foreach (Type t in AttackTypes)
            foreach (MethodBase m in t.GetMethods(All).Cast<MethodBase>().Concat(t.GetConstructors(All)))
            {
                foreach (MemberInfo member in ReferencedMembers(m))
                {
                    scanned++;
                    Type? owner = member as Type ?? member.DeclaringType;
                    Assert.False(IsScoring(owner), $"{t}.{m.Name} references {owner}.{member.Name}");
                    if (member is MethodBase mb) Assert.False(mb.GetParameters().Any(p => IsScoring(p.ParameterType)), $"{t}.{m.Name} calls {mb} with a scoring argument");
                }
            }
        Assert.True(scanned > 200, $"the IL walker found only {scanned} member references");
    }

    [Fact]
    public void The_il_walker_sees_a_scoring_reference_where_there_is_one()
    {
        // The scorer itself reads the ground truth: the walker must find that reference.
        MethodInfo score = typeof(Scorer).GetMethod(nameof(Scorer.Score))!;
        Assert.Contains(ReferencedMembers(score), m => (m as Type ?? m.DeclaringType) == typeof(GroundTruth));
    }

    [Fact]
    public void Ground_truth_has_no_public_reader_of_values()
    {
        Type g = typeof(GroundTruth);
        Assert.Empty(g.GetConstructors(BindingFlags.Public | BindingFlags.Instance));
        string[] publicMembers = g.GetMembers(BindingFlags.Public | BindingFlags.Instance | BindingFlags.DeclaredOnly).Select(m => m.Name).ToArray();
        Assert.Equal(new[] { "get_HouseholdIds", "HouseholdIds" }.Order(), publicMembers.Order());
    }

    // Every member token in a method's IL (call, callvirt, newobj, ldfld, ldsfld, stfld, ldtoken, ldftn, castclass, ...).
    private static IEnumerable<MemberInfo> ReferencedMembers(MethodBase method)
    {
        byte[]? il = method.GetMethodBody()?.GetILAsByteArray();
        if (il is null) yield break;
        Module module = method.Module;
        Type[]? typeArgs = method.DeclaringType?.IsGenericType == true ? method.DeclaringType.GetGenericArguments() : null;
        Type[]? methodArgs = method.IsGenericMethod ? method.GetGenericArguments() : null;
        int i = 0;
        while (i < il.Length)
        {
            OpCode op;
            if (il[i] == 0xFE) { op = TwoByte[il[i + 1]]; i += 2; }
            else { op = OneByte[il[i]]; i += 1; }
            int size = op.OperandType switch
            {
                OperandType.InlineNone => 0,
                OperandType.ShortInlineBrTarget or OperandType.ShortInlineI or OperandType.ShortInlineVar => 1,
                OperandType.InlineVar => 2,
                OperandType.InlineI8 or OperandType.InlineR => 8,
                OperandType.InlineSwitch => 4 + 4 * BitConverter.ToInt32(il, i),
                _ => 4,
            };
            if (op.OperandType is OperandType.InlineMethod or OperandType.InlineField or OperandType.InlineType or OperandType.InlineTok)
            {
                MemberInfo? member = null;
                try { member = module.ResolveMember(BitConverter.ToInt32(il, i), typeArgs, methodArgs); }
                catch (ArgumentException) { }
                if (member is not null) yield return member;
            }
            i += size;
        }
    }

    private static readonly OpCode[] OneByte = new OpCode[256];
    private static readonly OpCode[] TwoByte = new OpCode[256];

    static SeparationTests()
    {
        foreach (FieldInfo f in typeof(OpCodes).GetFields(BindingFlags.Public | BindingFlags.Static))
        {
            var op = (OpCode)f.GetValue(null)!;
            ushort v = (ushort)op.Value;
            if (op.Size == 1) OneByte[v] = op;
            else TwoByte[v & 0xFF] = op;
        }
    }
}
